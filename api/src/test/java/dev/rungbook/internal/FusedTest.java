package dev.rungbook.internal;

import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.testing.Fixtures;
import java.util.Random;
import org.junit.jupiter.api.Test;

class FusedTest {

    /** Outputs of one call. */
    private record Out(float[] scales, int[] zps, int[] codes, float[] dq, double[] sqErr, double[] sqSig) {
    }

    private static Out run(float[] w, int rows, int cols, int bits, boolean symmetric) {
        float[] scales = new float[rows];
        int[] zps = new int[rows];
        float[] dq = new float[rows * cols];
        double[] se = new double[rows];
        double[] ss = new double[rows];
        int[] codes = new int[rows * cols];
        if (bits <= 8) {
            byte[] c = new byte[rows * cols];
            Fused.quantizeRows(w, rows, cols, bits, symmetric, scales, zps, c, dq, se, ss);
            for (int i = 0; i < c.length; i++) {
                codes[i] = c[i];
            }
        } else {
            short[] c = new short[rows * cols];
            Fused.quantizeRows(w, rows, cols, bits, symmetric, scales, zps, c, dq, se, ss);
            for (int i = 0; i < c.length; i++) {
                codes[i] = c[i];
            }
        }
        return new Out(scales, zps, codes, dq, se, ss);
    }

    @Test
    void symmetricWorkedExampleRoundsTiesToEven() {
        // Source: textbook symmetric quantization, scale = max|x| / q_max (facts of the trade, check-values.md);
        // max |x| = 127 at 8 bits gives scale 1, so the codes are the values rounded half to even
        float[] w = {127f, 0.5f, 1.5f, 2.5f, -0.5f, -127f};
        Out o = run(w, 1, 6, 8, true);
        assertEquals(1f, o.scales()[0]);
        assertEquals(0, o.zps()[0]);
        assertArrayEquals(new int[] {127, 0, 2, 2, 0, -127}, o.codes());
        assertArrayEquals(new float[] {127f, 0f, 2f, 2f, 0f, -127f}, o.dq());
        assertEquals(4 * 0.25, o.sqErr()[0], 1e-12);
        assertEquals(2 * 127.0 * 127 + 0.25 + 2.25 + 6.25 + 0.25, o.sqSig()[0], 1e-9);
    }

    @Test
    void asymmetricWorkedExamples() {
        // Source: textbook asymmetric quantization, scale = (max - min) / (q_max - q_min), zp = round(q_min -
        // min / scale) (facts of the trade, check-values.md). 2 bits: q in [-2, 1]; row [-1, 3, 0, 1]:
        // scale = 4/3, zp = round(-2 + 0.75) = -1; codes round(x / scale) + zp = [-2, 1, -1, 0]
        Out o = run(new float[] {-1f, 3f, 0f, 1f}, 1, 4, 2, false);
        assertEquals(4f / 3, o.scales()[0], 1e-7);
        assertEquals(-1, o.zps()[0]);
        assertArrayEquals(new int[] {-2, 1, -1, 0}, o.codes());
        assertArrayEquals(new float[] {-4f / 3, 8f / 3, 0f, 4f / 3}, o.dq(), 1e-6f);
        assertEquals(0f, o.dq()[2], 0f, "zero is exact");
        double e = Math.pow(1 - 4.0 / 3, 2) + Math.pow(3 - 8.0 / 3, 2) + Math.pow(1 - 4.0 / 3, 2);
        assertEquals(e, o.sqErr()[0], 1e-6);
        // 8 bits, all positive: the range is stretched to contain 0, scale = 2.55 / 255, zp = -128
        Out p = run(new float[] {0.5f, 2.55f, 1f}, 1, 3, 8, false);
        assertEquals(0.01f, p.scales()[0], 1e-8f);
        assertEquals(-128, p.zps()[0]);
        assertArrayEquals(new int[] {-78, 127, -28}, p.codes());
        assertArrayEquals(new float[] {0.5f, 2.55f, 1f}, p.dq(), 1e-6f);
    }

    @Test
    void zeroAndTinyRowsAreExactAndNeverNaN() {
        float[] w = {0f, 0f, 0f, -0f, 1e-44f, 0f, -1e-44f, 3e-45f, 5f, 5f, 5f, 5f};
        for (boolean sym : new boolean[] {true, false}) {
            Out o = run(w, 3, 4, 8, sym);
            assertEquals(1f, o.scales()[0]);
            assertEquals(0, o.zps()[0]);
            for (int i = 0; i < 4; i++) {
                assertEquals(0, o.codes()[i]);
                assertEquals(0f, o.dq()[i]);
            }
            assertEquals(0.0, o.sqErr()[0]);
            assertTrue(o.scales()[1] >= Float.MIN_NORMAL);
            for (int i = 4; i < 8; i++) {
                assertTrue(Float.isFinite(o.dq()[i]) && Math.abs(o.dq()[i] - w[i]) <= 1e-44f, "row 1: " + o.dq()[i]);
            }
            assertTrue(Double.isFinite(o.sqErr()[1]) && Double.isFinite(o.sqSig()[1]));
            assertArrayEquals(new float[] {5f, 5f, 5f, 5f}, java.util.Arrays.copyOfRange(o.dq(), 8, 12), 1e-6f);
        }
    }

    /** Straightforward reference: textbook formulas with Math.rint, written without the kernel's tricks. */
    private static void assertMatchesReference(float[] w, int rows, int cols, int bits, boolean sym) {
        Out o = run(w, rows, cols, bits, sym);
        int qmax = (1 << (bits - 1)) - 1;
        int qmin = sym ? -qmax : -(1 << (bits - 1));
        for (int r = 0; r < rows; r++) {
            double mn = 0;
            double mx = 0;
            for (int c = 0; c < cols; c++) {
                mn = Math.min(mn, w[r * cols + c]);
                mx = Math.max(mx, w[r * cols + c]);
            }
            float scale = (float) (sym ? Math.max(-mn, mx) / qmax : (mx - mn) / (qmax - qmin));
            int zp = sym ? 0 : (int) Math.rint(qmin - mn / scale);
            assertEquals(scale, o.scales()[r], "row " + r);
            assertEquals(zp, o.zps()[r], "row " + r);
            double se = 0;
            double ss = 0;
            for (int c = 0; c < cols; c++) {
                int i = r * cols + c;
                float x = w[i];
                int q = (int) Math.max(qmin, Math.min(qmax, Math.rint(x / scale) + zp));
                float d = (q - zp) * scale;
                assertEquals(q, o.codes()[i], "code at " + i);
                assertEquals(d, o.dq()[i], "dequant at " + i);
                se += (double) (x - d) * (x - d);
                ss += (double) x * x;
            }
            assertEquals(se, o.sqErr()[r], 1e-5 * se, "row " + r);
            assertEquals(ss, o.sqSig()[r], 1e-5 * ss, "row " + r);
        }
    }

    @Test
    void matchesStraightforwardReferenceForAllBitWidths() {
        Random rnd = Fixtures.random(81);
        int rows = 7;
        int cols = 301;
        float[] w = new float[rows * cols];
        for (int i = 0; i < w.length; i++) {
            int r = i / cols;
            w[i] = (float) (rnd.nextGaussian() * Math.pow(10, r - 3) + (r == 2 ? 5 * Math.pow(10, r - 3) : 0));
        }
        for (int bits = 2; bits <= 16; bits++) {
            assertMatchesReference(w, rows, cols, bits, true);
            assertMatchesReference(w, rows, cols, bits, false);
        }
    }

    private static float[] uniform(long seed, int n, double lo, double hi) {
        Random rnd = Fixtures.random(seed);
        float[] w = new float[n];
        for (int i = 0; i < n; i++) {
            w[i] = (float) (lo + (hi - lo) * rnd.nextDouble());
        }
        return w;
    }

    @Test
    void uniformDataHasNoiseVarianceStepSquaredOverTwelve() {
        int rows = 256;
        int cols = 4096;
        // symmetric grids on data symmetric about 0; asymmetric grids on shifted data (non-zero zero point)
        float[] symData = uniform(82, rows * cols, -1, 1);
        float[] asymData = uniform(84, rows * cols, -0.7, 1.3);
        for (int bits : new int[] {3, 4, 6, 8}) {
            for (boolean sym : new boolean[] {true, false}) {
                Out o = run(sym ? symData : asymData, rows, cols, bits, sym);
                double noise = 0;
                double predicted = 0;
                for (int r = 0; r < rows; r++) {
                    noise += o.sqErr()[r];
                    predicted += cols * (double) o.scales()[r] * o.scales()[r] / 12;
                }
                // Source: textbook uniform quantization noise Delta^2 / 12, check-values.md §13 (about 10^6 samples:
                // standard error 0.1%; the end cells, shifted by the rounded zero point, add a little more)
                assertEquals(1.0, noise / predicted, 0.01, "bits " + bits + " symmetric " + sym);
            }
        }
    }

    @Test
    void uniformFullRangeInputGivesSixDecibelsPerBit() {
        int rows = 64;
        int cols = 4096;
        float[] w = uniform(83, rows * cols, -1, 1);
        for (int bits = 8; bits <= 16; bits += 2) {
            for (boolean sym : new boolean[] {true, false}) {
                Out o = run(w, rows, cols, bits, sym);
                double noise = 0;
                double signal = 0;
                for (int r = 0; r < rows; r++) {
                    noise += o.sqErr()[r];
                    signal += o.sqSig()[r];
                }
                double sqnr = 10 * Math.log10(signal / noise);
                // Source: textbook SQNR of a uniform full-range input, 6.02 b dB (check-values.md §13). With
                // 2^b - 1 steps across the range the exact value is 20 log10(2^b - 1), within 0.04 dB of 6.02 b
                // from 8 bits on.
                assertEquals(6.02 * bits, sqnr, 0.1, "bits " + bits + " symmetric " + sym);
            }
        }
    }

    @Test
    void refusesBadInputNamingThePlace() {
        float[] w = {1f, 2f, 3f, Float.NaN, 5f, 6f};
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class, () -> run(w, 2, 3, 8, false));
        assertTrue(e.getMessage().contains("row 1, column 0"), e.getMessage());
        float[] inf = {1f, Float.NEGATIVE_INFINITY};
        assertThrows(IllegalArgumentException.class, () -> run(inf, 1, 2, 4, true));
        // the vector pass takes a row's min/max while it quantizes the row before: a bad value in a vector lane
        // or in the tail of a later row is still found and named before that row is quantized
        for (int at : new int[] {2 * 70 + 5, 2 * 70 + 67}) {
            float[] big = new float[3 * 70];
            java.util.Arrays.fill(big, 0.5f);
            big[at] = Float.POSITIVE_INFINITY;
            IllegalArgumentException v = assertThrows(IllegalArgumentException.class, () -> run(big, 3, 70, 8, true));
            assertTrue(v.getMessage().contains("row 2, column " + (at - 140)), v.getMessage());
        }
        assertThrows(IllegalArgumentException.class, () -> Fused.quantizeRows(new float[4], 1, 4, 9, true,
                new float[1], new int[1], new byte[4], new float[4], null, null));
        assertThrows(IllegalArgumentException.class, () -> Fused.quantizeRows(new float[4], 1, 4, 1, true,
                new float[1], new int[1], new short[4], new float[4], null, null));
        assertThrows(IllegalArgumentException.class, () -> Fused.quantizeRows(new float[3], 1, 4, 8, true,
                new float[1], new int[1], new byte[4], new float[4], null, null));
    }

    @Test
    void vectorPassGivesTheBitsOfThePlainLoops() {
        // Reference: the plain loops of the same class (vector=false), which the tests above check against the
        // textbook formulas; the one-pass Vector API row must reproduce them bit for bit (codes, dequantized
        // values, sums). Row lengths cover whole chunks, partial chunks and rows shorter than one vector.
        assertTrue(Lanes.vectorised(), "the api tests run with the Vector API module");
        Random rnd = Fixtures.random(85);
        for (int cols : new int[] {1, 7, 8, 9, 63, 64, 65, 130, 301, 1024}) {
            int rows = 6;
            float[] w = new float[rows * cols];
            for (int i = 0; i < w.length; i++) {
                int r = i / cols;
                w[i] = switch (r) {
                    case 0 -> 0f; // zero row
                    case 1 -> 3.25f; // constant row
                    case 2 -> (float) (rnd.nextGaussian() * 1e-30); // tiny values
                    case 3 -> (float) Math.rint(rnd.nextGaussian() * 40) / 2; // many exact ties
                    default -> (float) (rnd.nextGaussian() * Math.pow(10, r - 4) + 0.3);
                };
            }
            for (int bits : new int[] {2, 4, 8, 12, 16}) {
                for (boolean sym : new boolean[] {true, false}) {
                    Out a = rows(w, rows, cols, bits, sym, true);
                    Out b = rows(w, rows, cols, bits, sym, false);
                    String at = cols + " columns, " + bits + " bits, symmetric " + sym;
                    assertArrayEquals(b.scales(), a.scales(), at);
                    assertArrayEquals(b.zps(), a.zps(), at);
                    assertArrayEquals(b.codes(), a.codes(), at);
                    assertArrayEquals(b.dq(), a.dq(), at);
                    assertArrayEquals(b.sqErr(), a.sqErr(), at);
                    assertArrayEquals(b.sqSig(), a.sqSig(), at);
                }
            }
        }
    }

    private static Out rows(float[] w, int rows, int cols, int bits, boolean symmetric, boolean vector) {
        float[] scales = new float[rows];
        int[] zps = new int[rows];
        float[] dq = new float[rows * cols];
        double[] se = new double[rows];
        double[] ss = new double[rows];
        int[] codes = new int[rows * cols];
        byte[] bytes = bits <= 8 ? new byte[rows * cols] : null;
        short[] shorts = bits <= 8 ? null : new short[rows * cols];
        Fused.rows(w, rows, cols, bits, symmetric, scales, zps, bytes, shorts, dq, se, ss, vector);
        for (int i = 0; i < codes.length; i++) {
            codes[i] = bytes != null ? bytes[i] : shorts[i];
        }
        return new Out(scales, zps, codes, dq, se, ss);
    }
}
