package dev.rungbook.internal;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.quant.Quantized;
import dev.rungbook.quant.Quantizer;
import dev.rungbook.tensor.Tensor;
import java.math.BigDecimal;
import java.util.SplittableRandom;
import org.junit.jupiter.api.Test;

/**
 * The fused per-group kernels against the public API's specs (codes, scales, dequantized values bit for bit) and
 * their error sums against exact BigDecimal sums of the same values.
 */
class FusedSegmentsTest {
    private static final int ROWS = 24;
    private static final int COLS = 256;

    /**
     * Rows of Gaussian values whose ranges differ by orders of magnitude, with an all-zero row, a constant row, a
     * row of exact grid ties (odd multiples of half a step) and a row of tiny values.
     */
    private static float[] matrix(long seed) {
        SplittableRandom r = new SplittableRandom(seed);
        float[] w = new float[ROWS * COLS];
        for (int row = 0; row < ROWS; row++) {
            double range = Math.exp(r.nextDouble(-6, 4));
            for (int c = 0; c < COLS; c++) {
                w[row * COLS + c] = (float) (range * r.nextGaussian());
            }
        }
        java.util.Arrays.fill(w, 3 * COLS, 4 * COLS, 0f);
        java.util.Arrays.fill(w, 5 * COLS, 6 * COLS, -0.37f);
        for (int c = 0; c < COLS; c++) {
            // int4: max |x| = 7 gives scale 1, so these are exact ties x.5 of the grid
            w[7 * COLS + c] = c % 16 == 0 ? 7f : (r.nextInt(-14, 14) + 0.5f) / 2f;
            w[9 * COLS + c] = (float) (1e-30 * r.nextGaussian());
        }
        return w;
    }

    private static double exactSquares(float[] a, float[] b, int from, int to) {
        BigDecimal s = BigDecimal.ZERO;
        for (int i = from; i < to; i++) {
            BigDecimal d = new BigDecimal(a[i]).subtract(b == null ? BigDecimal.ZERO : new BigDecimal(b[i]));
            s = s.add(d.multiply(d));
        }
        return s.doubleValue();
    }

    /** One kernel call's outputs for {@code w} in segments of {@code m}. */
    private static final class Out {
        final float[] w;
        final int m;
        final int count;
        final float[] scales;
        final byte[] codes;
        final float[] dq;
        final double[] se;
        final double[] ss;

        Out(float[] w, int m) {
            this.w = w;
            this.m = m;
            count = w.length / m;
            scales = new float[count];
            codes = new byte[w.length];
            dq = new float[w.length];
            se = new double[count];
            ss = new double[count];
        }

        /** Codes, scales and values equal the API's bit for bit; the sums equal exact sums of the same values. */
        void assertSameAsApiAndExact(Quantized api) {
            for (int s = 0; s < count; s++) {
                assertEquals(api.scales().getFlat(s), scales[s], "scale " + s);
            }
            for (int i = 0; i < codes.length; i++) {
                assertEquals(api.codes().get(i), codes[i], "code " + i);
                assertEquals(Float.floatToRawIntBits(api.dequantized().getFlat(i)), Float.floatToRawIntBits(dq[i]),
                        "dequantized value " + i);
            }
            for (int s = 0; s < count; s++) {
                // Source: BigDecimal arithmetic on the same floats (exact); the kernel's float partial sums stay
                // within about 1e-5 relative (Fused's class comment)
                double e = exactSquares(w, dq, s * m, (s + 1) * m);
                double x = exactSquares(w, null, s * m, (s + 1) * m);
                assertEquals(e, se[s], 1e-5 * e + Double.MIN_VALUE, "error sum of segment " + s);
                assertEquals(x, ss[s], 1e-5 * x + Double.MIN_VALUE, "signal sum of segment " + s);
            }
        }
    }

    @Test
    void perGroupLinearGivesTheApisResultsAndExactSums() {
        for (int bits : new int[] {2, 3, 4, 8}) {
            for (int m : new int[] {16, 128, 48}) {
                float[] w = matrix(11L * bits + m);
                Out o = new Out(w, m);
                FusedSegments.linear(w, o.count, m, bits, o.scales, o.codes, o.dq, o.se, o.ss);
                Tensor t = COLS % m == 0 ? Tensor.of(w, ROWS, COLS) : Tensor.of(w, o.count, m);
                o.assertSameAsApiAndExact(Quantizer.linear(bits).perGroup(1, m).apply(t));
            }
        }
    }

    @Test
    void nf4BlocksGiveTheApisResultsAndExactSums() {
        // 16, 32 and 64: sums formed on the way out of the sixteen-lane kernel; 256 (over one chunk), 24 (a tail
        // after the vectors) and 48 (not a power of two): sums after the segment
        for (int m : new int[] {64, 32, 256, 16, 24, 48}) {
            float[] w = matrix(29L + m);
            Out o = new Out(w, m);
            FusedSegments.nf4(w, o.count, m, o.scales, o.codes, o.dq, o.se, o.ss);
            Tensor t = COLS % m == 0 ? Tensor.of(w, ROWS, COLS) : Tensor.of(w, o.count, m);
            o.assertSameAsApiAndExact(Quantizer.nf4().blockSize(m).apply(t));
            // Reference: the plain loops of the error sums (Fused.scalarSegmentSums) on the same values: the same
            // operations in the same order, so the same bits, whichever kernel formed them
            double[] se = new double[o.count];
            double[] ss = new double[o.count];
            Fused.scalarSegmentSums(w, o.dq, 0, o.count, m, o.scales, 0, se, ss);
            for (int s = 0; s < o.count; s++) {
                assertEquals(Double.doubleToLongBits(se[s]), Double.doubleToLongBits(o.se[s]), "error sum " + s + ", m " + m);
                assertEquals(Double.doubleToLongBits(ss[s]), Double.doubleToLongBits(o.ss[s]), "signal sum " + s + ", m " + m);
            }
        }
    }

    @Test
    void tiesRoundToEvenAndZeroGroupsAreExact() {
        // Source: symmetric int4 with max |x| = 7 has scale 7 / 7 = 1, so the codes are the values rounded half to
        // even (IEEE 754 roundTiesToEven), worked by hand
        float[] w = {7f, 0.5f, 1.5f, 2.5f, -0.5f, -2.5f, 3.5f, -7f, 0f, 0f, 0f, 0f, 0f, 0f, 0f, 0f};
        float[] scales = new float[2];
        byte[] codes = new byte[16];
        float[] dq = new float[16];
        double[] se = new double[2];
        FusedSegments.linear(w, 2, 8, 4, scales, codes, dq, se, null);
        assertEquals(1f, scales[0]);
        byte[] expected = {7, 0, 2, 2, 0, -2, 4, -7};
        for (int i = 0; i < 8; i++) {
            assertEquals(expected[i], codes[i], "code " + i);
            assertEquals(expected[i], dq[i], "value " + i);
        }
        assertEquals(6 * 0.25, se[0], 1e-12);
        assertEquals(1f, scales[1], "an all-zero group gets scale 1");
        assertEquals(0.0, se[1]);
        for (int i = 8; i < 16; i++) {
            assertEquals(0, codes[i]);
            assertEquals(0f, dq[i]);
        }
    }

    @Test
    void refusesNonFiniteValuesAndBadSizesNamingThePlace() {
        float[] w = new float[64];
        w[41] = Float.NaN;
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                () -> FusedSegments.linear(w, 4, 16, 4, new float[4], new byte[64], new float[64], null, null));
        assertTrue(e.getMessage().contains("index 41") && e.getMessage().contains("segment 2"), e.getMessage());
        w[41] = Float.NEGATIVE_INFINITY;
        e = assertThrows(IllegalArgumentException.class,
                () -> FusedSegments.nf4(w, 4, 16, new float[4], new byte[64], new float[64], null, null));
        assertTrue(e.getMessage().contains("index 41"), e.getMessage());
        e = assertThrows(IllegalArgumentException.class,
                () -> FusedSegments.nf4(w, 5, 16, new float[5], new byte[80], new float[80], null, null));
        assertTrue(e.getMessage().contains("need 5 x 16"), e.getMessage());
        assertThrows(IllegalArgumentException.class,
                () -> FusedSegments.linear(new float[8], 1, 8, 9, new float[1], new byte[8], new float[8], null, null));
        // a bad value in a later run of segments, whose magnitudes the previous run's kernel took on the side
        float[] big = new float[600 * 16];
        java.util.Arrays.fill(big, 0.5f);
        big[300 * 16 + 5] = Float.POSITIVE_INFINITY;
        e = assertThrows(IllegalArgumentException.class, () -> FusedSegments.nf4(big, 600, 16, new float[600],
                new byte[big.length], new float[big.length], null, null));
        assertTrue(e.getMessage().contains("index " + (300 * 16 + 5)) && e.getMessage().contains("segment 300"),
                e.getMessage());
        big[300 * 16 + 5] = Float.NaN;
        e = assertThrows(IllegalArgumentException.class, () -> FusedSegments.linear(big, 600, 16, 4, new float[600],
                new byte[big.length], new float[big.length], null, null));
        assertTrue(e.getMessage().contains("index " + (300 * 16 + 5)), e.getMessage());
    }
}
