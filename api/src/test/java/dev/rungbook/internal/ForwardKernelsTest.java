package dev.rungbook.internal;

import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.nn.FixedPoint;
import java.util.SplittableRandom;
import org.junit.jupiter.api.Test;

/**
 * The packed forward kernels (Vector API panels, present in the test JVM, and the plain loops) against the
 * straightforward one-output-at-a-time loops: float bit for bit (the summation order is the same), int32 exactly; and
 * the reference loops against independent arithmetic (double sums within a rounding bound, long sums exactly).
 * Shapes 1, 3, 17, 33 and 513 take every remainder path: the row blocks of four, one- and two-vector panels and
 * partly filled panels.
 */
class ForwardKernelsTest {
    private static final int[] SIZES = {1, 3, 17, 33, 513};

    private static float[] floats(SplittableRandom r, int n) {
        float[] v = new float[n];
        for (int i = 0; i < n; i++) {
            int k = r.nextInt(40);
            v[i] = k == 0 ? -0.0f : k == 1 ? 0.0f : (float) (r.nextGaussian() * Math.exp(r.nextDouble(-4, 4)));
        }
        return v;
    }

    private static int[] ints(SplittableRandom r, int n, int lo, int hi) {
        int[] v = new int[n];
        for (int i = 0; i < n; i++) {
            v[i] = r.nextInt(lo, hi + 1);
        }
        return v;
    }

    @Test
    void theVectorPathIsPresentInTheTestJvm() {
        assertTrue(ForwardKernels.vectorised(), "surefire runs with --add-modules jdk.incubator.vector");
    }

    @Test
    void floatPanelsEqualTheReferenceLoopBitForBit() {
        SplittableRandom r = new SplittableRandom(11);
        for (int n : SIZES) {
            for (int in : SIZES) {
                for (int out : SIZES) {
                    if ((long) n * in * out > 3_000_000) {
                        continue; // 513^3 adds nothing the other shapes do not cover
                    }
                    float[] x = floats(r, n * in);
                    float[] w = floats(r, out * in);
                    float[] b = floats(r, out);
                    float[] want = ForwardKernels.referenceAffine(x, n, w, b, in, out);
                    ForwardKernels.FloatPanels p = ForwardKernels.FloatPanels.of(w, b, out, in);
                    String shape = n + " x " + in + " -> " + out;
                    // assertArrayEquals on floats compares Float.floatToIntBits: -0.0 and 0.0 differ
                    assertArrayEquals(want, p.affine(x, n, false, true), "vector panels, " + shape);
                    assertArrayEquals(want, p.affine(x, n, false, false), "plain panels, " + shape);
                    assertArrayEquals(want, p.affine(x, n), "default path, " + shape);
                    float[] relu = want.clone();
                    for (int i = 0; i < relu.length; i++) {
                        relu[i] = Math.max(0f, relu[i]);
                    }
                    assertArrayEquals(relu, p.affine(x, n, true, true), "vector panels with ReLU, " + shape);
                    assertArrayEquals(relu, p.affine(x, n, true, false), "plain panels with ReLU, " + shape);
                }
            }
        }
    }

    @Test
    void theFloatReferenceIsTheProductWithinRounding() {
        // Source: the same sums in double precision; each of the `in` fused steps rounds once to float, so the error
        // is below in * 2^-24 * sum |terms| (a standard bound, from memory).
        SplittableRandom r = new SplittableRandom(12);
        int n = 17;
        int in = 33;
        int out = 3;
        float[] x = floats(r, n * in);
        float[] w = floats(r, out * in);
        float[] b = floats(r, out);
        float[] y = ForwardKernels.referenceAffine(x, n, w, b, in, out);
        for (int i = 0; i < n; i++) {
            for (int o = 0; o < out; o++) {
                double s = b[o];
                double mag = Math.abs(b[o]);
                for (int t = 0; t < in; t++) {
                    s += (double) x[i * in + t] * w[o * in + t];
                    mag += Math.abs((double) x[i * in + t] * w[o * in + t]);
                }
                assertEquals(s, y[i * out + o], (in + 1) * 0x1p-24 * mag, "y[" + i + "," + o + "]");
            }
        }
    }

    @Test
    void intPanelsEqualTheReferenceLoopExactly() {
        SplittableRandom r = new SplittableRandom(13);
        for (int n : SIZES) {
            for (int in : SIZES) {
                for (int out : SIZES) {
                    if ((long) n * in * out > 3_000_000) {
                        continue;
                    }
                    int[] x = ints(r, n * in, 0, 255);
                    int[] w = ints(r, out * in, -127, 127);
                    int[] init = ints(r, out, -100_000, 100_000);
                    int[] want = ForwardKernels.referenceAccumulate(x, n, w, init, in, out);
                    ForwardKernels.IntPanels p = ForwardKernels.IntPanels.of(w, out, in);
                    String shape = n + " x " + in + " -> " + out;
                    assertArrayEquals(want, p.accumulate(x, n, init, true), "vector panels, " + shape);
                    assertArrayEquals(want, p.accumulate(x, n, init, false), "plain panels, " + shape);
                    assertArrayEquals(want, p.accumulate(x, n, init), "default path, " + shape);
                }
            }
        }
    }

    @Test
    void intReferenceIsTheLongSumAndWrapsLikeJava() {
        // Source: the sums in 64-bit arithmetic; Java's int32 result is the low 32 bits of the exact sum (JLS 15.17.1
        // and 15.18.2), so huge values check the wrap-around as well.
        SplittableRandom r = new SplittableRandom(14);
        int n = 5;
        int in = 17;
        int out = 33;
        for (int[] range : new int[][] {{-255, 255}, {Integer.MIN_VALUE / 2, Integer.MAX_VALUE / 2}}) {
            int[] x = ints(r, n * in, range[0], range[1]);
            int[] w = ints(r, out * in, range[0], range[1]);
            int[] init = ints(r, out, range[0], range[1]);
            int[] y = ForwardKernels.IntPanels.of(w, out, in).accumulate(x, n, init);
            assertArrayEquals(ForwardKernels.referenceAccumulate(x, n, w, init, in, out), y);
            for (int i = 0; i < n; i++) {
                for (int o = 0; o < out; o++) {
                    long s = init[o];
                    for (int t = 0; t < in; t++) {
                        s += (long) x[i * in + t] * w[o * in + t];
                    }
                    assertEquals((int) s, y[i * out + o], "acc[" + i + "," + o + "]");
                }
            }
        }
    }

    @Test
    void nonFiniteValuesPropagateAsInTheReference() {
        float[] x = {1f, Float.NaN, 2f, 3f, Float.POSITIVE_INFINITY, 0f};
        float[] w = {1f, 1f, 1f, 0f, 1f, 2f};
        float[] b = {-0.0f, 1f};
        float[] want = ForwardKernels.referenceAffine(x, 2, w, b, 3, 2);
        assertArrayEquals(want, ForwardKernels.FloatPanels.of(w, b, 2, 3).affine(x, 2));
        assertTrue(Float.isNaN(want[0]) && Float.isNaN(want[1]), "NaN input of sample 0 reaches both outputs");
        assertEquals(Float.POSITIVE_INFINITY, want[2], "infinite input of sample 1, weight 1");
        // ReLU: Math.max(0, NaN) is NaN and Math.max(0, -0.0) is 0.0; the fused kernels must agree bit for bit
        float[] z = {0f, 0f, 0f, 0f}; // fma(0, -1, -0.0) = -0.0 + -0.0 = -0.0
        float[] zb = {-0.0f, -0.0f};
        ForwardKernels.FloatPanels pz = ForwardKernels.FloatPanels.of(new float[] {-1f, -1f, 1f, 1f}, zb, 2, 2);
        float[] pre = ForwardKernels.referenceAffine(z, 2, new float[] {-1f, -1f, 1f, 1f}, zb, 2, 2);
        assertEquals(Float.floatToIntBits(-0.0f), Float.floatToIntBits(pre[0]), "a -0.0 output before the ReLU");
        assertArrayEquals(new float[] {0f, 0f, 0f, 0f}, pz.affineRelu(z, 2));
        float[] nanRelu = ForwardKernels.FloatPanels.of(w, b, 2, 3).affineRelu(x, 2);
        assertTrue(Float.isNaN(nanRelu[0]) && Float.isNaN(nanRelu[1]), "NaN passes the ReLU");
    }

    @Test
    void wideLayersKeepNanAndSignedZerosThroughTheRelu() {
        // Source: Math.max's definition (NaN if either argument is NaN; 0.0 above -0.0), against the reference loop,
        // on a layer wide enough for whole vectors of outputs and a remainder (43 = 2 * 16 + 11 columns), 9 samples.
        int in = 3;
        int out = 43;
        int n = 9;
        float[] w = new float[out * in];
        float[] b = new float[out];
        for (int o = 0; o < out; o++) {
            w[o * in] = o % 3 == 0 ? -1f : 1f;
            w[o * in + 1] = 0f;
            w[o * in + 2] = o % 2 == 0 ? 1f : -1f;
            b[o] = o % 5 == 0 ? -0.0f : 0.25f * (o - 20);
        }
        float[] x = new float[n * in];
        for (int s = 0; s < n; s++) {
            x[s * in] = s == 2 ? Float.NaN : s == 4 ? Float.NEGATIVE_INFINITY : s == 6 ? -0.0f : s - 4f;
            x[s * in + 1] = 7f;
            x[s * in + 2] = s == 6 ? -0.0f : 0.5f * s;
        }
        float[] want = ForwardKernels.referenceAffine(x, n, w, b, in, out);
        for (int i = 0; i < want.length; i++) {
            want[i] = Math.max(0f, want[i]);
        }
        ForwardKernels.FloatPanels p = ForwardKernels.FloatPanels.of(w, b, out, in);
        assertArrayEquals(want, p.affineRelu(x, n));
        assertArrayEquals(want, p.affine(x, n, true, false));
        assertTrue(Float.isNaN(want[2 * out + 20]), "sample 2's NaN reaches the outputs");
    }

    @Test
    void badShapesAreNamed() {
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                () -> ForwardKernels.FloatPanels.of(new float[5], new float[2], 2, 3));
        assertTrue(e.getMessage().contains("weight [2, 3] needs 6 values, got 5"), e.getMessage());
        ForwardKernels.IntPanels p = ForwardKernels.IntPanels.of(new int[6], 2, 3);
        e = assertThrows(IllegalArgumentException.class, () -> p.accumulate(new int[5], 2, new int[2]));
        assertTrue(e.getMessage().contains("input [2, 3] needs 6 values, got 5"), e.getMessage());
    }

    @Test
    void fixedPointColumnsAreFixedPointApplyExactly() {
        // Source: FixedPoint.apply (the published saturating rounding doubling high multiply, then the rounding right
        // shift, ties away from zero) and FixedPoint.applySingleRounding, both checked against worked examples and
        // BigDecimal in FixedPointTest; then the offset and the clamp. Vector and plain paths, a tail of columns
        // past the last whole vector, the extreme accumulators, and exact ties of both roundings (M0 = 2^30 halves
        // the accumulator: odd accumulators tie in the high multiply, +-(2j+1) 2^n in the shift) of both signs.
        SplittableRandom r = new SplittableRandom(41);
        int out = 71;
        int n = 3;
        int[] edges = {0, 1, -1, 2, -2, 3, -3, Integer.MAX_VALUE, Integer.MIN_VALUE, Integer.MAX_VALUE - 1,
            Integer.MIN_VALUE + 1, 1 << 30, -(1 << 30), (1 << 30) + 1, -(1 << 30) - 1, 12345, -12345};
        for (int round = 0; round < 3000; round++) {
            FixedPoint[] m = new FixedPoint[out];
            int[] m0 = new int[out];
            int[] sh = new int[out];
            for (int c = 0; c < out; c++) {
                int k = r.nextInt(0, 32);
                // multipliers from 2^-32 up to just below 1, exact powers of two, and 0.5 - ulp (M0 rounds up to 1: n = 0)
                double real = c == 0 ? Math.nextDown(0.5) : r.nextInt(4) == 0 ? Math.scalb(0.5, -k)
                        : Math.scalb(r.nextDouble(0.5, 1.0), -k);
                m[c] = FixedPoint.of(real);
                m0[c] = m[c].multiplier();
                sh[c] = m[c].shift();
            }
            int[] acc = new int[n * out];
            for (int i = 0; i < acc.length; i++) {
                int c = i % out;
                int kind = r.nextInt(6);
                acc[i] = kind == 0 ? edges[r.nextInt(edges.length)]
                        : kind == 1 ? r.nextInt()
                        : kind == 2 ? (int) Math.max(Integer.MIN_VALUE, Math.min(Integer.MAX_VALUE,
                                (2L * r.nextInt(-2000, 2000) + 1) << Math.min(30, sh[c])))
                        : kind == 3 ? 2 * r.nextInt(-1 << 20, 1 << 20) + 1
                        : r.nextInt(-1 << 20, 1 << 20);
            }
            int zy = r.nextInt(0, 256);
            int lo = r.nextBoolean() ? zy : 0;
            int qmax = r.nextBoolean() ? 255 : 31;
            zy = Math.min(zy, qmax);
            lo = Math.min(lo, qmax);
            for (boolean single : new boolean[] {false, true}) {
                ForwardKernels.FixedPointColumns cols = ForwardKernels.FixedPointColumns.of(m0, sh, single);
                for (boolean vector : new boolean[] {true, false}) {
                    int[] y = acc.clone();
                    cols.apply(y, n, zy, lo, qmax, vector);
                    for (int i = 0; i < y.length; i++) {
                        FixedPoint f = m[i % out];
                        long v = single ? f.applySingleRounding(acc[i]) : f.apply(acc[i]);
                        long want = Math.max(lo, Math.min(qmax, zy + v));
                        assertEquals(want, y[i], "acc " + acc[i] + ", " + f + (single ? ", single" : ", double")
                                + (vector ? ", vector" : ", plain"));
                    }
                }
            }
        }
    }

    @Test
    void fixedPointColumnsRefuseShiftsTheyDoNotServe() {
        assertThrows(IllegalArgumentException.class,
                () -> ForwardKernels.FixedPointColumns.of(new int[] {1 << 30}, new int[] {32}, false));
        assertThrows(IllegalArgumentException.class,
                () -> ForwardKernels.FixedPointColumns.of(new int[] {1 << 30}, new int[] {-1}, false));
        assertThrows(IllegalArgumentException.class,
                () -> ForwardKernels.FixedPointColumns.of(new int[] {(1 << 30) - 1}, new int[] {3}, true));
    }

    @Test
    void quantizeCodesAreTheClampedRoundedQuotient() {
        // Source: the definition clamp(rint(v / s) + zp, 0, qmax) with Math.rint (ties to even) and Math.min/max in
        // double, NaN giving 0 as (int) NaN does. Exact ties: s = 0.25 makes v = k/8 a quotient k/2; values far
        // outside the grid (beyond 2^51 after the division, where the vector rounding's magic constant stops being
        // exact) and the special values; lengths with and without a tail past the last whole vector.
        SplittableRandom r = new SplittableRandom(47);
        double[] scales = {0.25, 0.0213, 1e-30, 3.7e5};
        for (int len : new int[] {1, 15, 16, 17, 513, 9000}) {
            for (double s : scales) {
                float[] v = new float[len];
                for (int i = 0; i < len; i++) {
                    int kind = r.nextInt(8);
                    v[i] = kind == 0 ? (float) (r.nextInt(-2100, 2100) / 8.0)
                            : kind == 1 ? new float[] {Float.NaN, -0.0f, 0.0f, Float.POSITIVE_INFINITY,
                                Float.NEGATIVE_INFINITY, Float.MAX_VALUE, -Float.MAX_VALUE, Float.MIN_VALUE,
                                0x1p51f, -0x1p51f, 0x1p52f, 0x1.8p52f}[r.nextInt(12)]
                            : (float) (r.nextGaussian() * s * 100);
                }
                for (int[] grid : new int[][] {{0, 255}, {128, 255}, {3, 15}}) {
                    int zp = grid[0];
                    int qmax = grid[1];
                    int[] vector = ForwardKernels.quantizeCodes(v, s, zp, qmax, true);
                    int[] plain = ForwardKernels.quantizeCodes(v, s, zp, qmax, false);
                    for (int i = 0; i < len; i++) {
                        double c = Math.rint(v[i] / s) + zp;
                        int want = Double.isNaN(c) ? 0 : (int) Math.max(0, Math.min(qmax, c));
                        assertEquals(want, vector[i], "vector, value " + v[i] + ", scale " + s + ", zp " + zp);
                        assertEquals(want, plain[i], "plain, value " + v[i] + ", scale " + s + ", zp " + zp);
                    }
                }
            }
        }
    }

    @Test
    void intPanelCodesAreTheRequantizedReferenceSums() {
        // Source: referenceAccumulate (the one-output-at-a-time int32 loop, itself checked against long sums above)
        // followed by FixedPoint.apply / applySingleRounding per output, the offset and the clamp. Output widths
        // with and without whole two-vector panels, one-vector panels and a tail; row counts with a remainder.
        SplittableRandom r = new SplittableRandom(53);
        for (int n : new int[] {1, 3, 17, 66}) {
            for (int in : new int[] {1, 3, 72}) {
                for (int out : new int[] {1, 5, 17, 33, 48, 64, 70, 129}) {
                    int[] x = ints(r, n * in, 0, 255);
                    int[] w = ints(r, out * in, -128, 127);
                    int[] init = ints(r, out, -3_000_000, 3_000_000);
                    FixedPoint[] m = new FixedPoint[out];
                    int[] m0 = new int[out];
                    int[] sh = new int[out];
                    for (int c = 0; c < out; c++) {
                        m[c] = FixedPoint.of(Math.scalb(r.nextDouble(0.5, 1.0), -r.nextInt(8, 20)));
                        m0[c] = m[c].multiplier();
                        sh[c] = m[c].shift();
                    }
                    int[] acc = ForwardKernels.referenceAccumulate(x, n, w, init, in, out);
                    ForwardKernels.IntPanels p = ForwardKernels.IntPanels.of(w, out, in);
                    int zy = r.nextInt(0, 256);
                    int lo = r.nextBoolean() ? zy : 0;
                    for (boolean single : new boolean[] {false, true}) {
                        ForwardKernels.FixedPointColumns cols = ForwardKernels.FixedPointColumns.of(m0, sh, single);
                        int[] want = new int[n * out];
                        for (int i = 0; i < want.length; i++) {
                            FixedPoint f = m[i % out];
                            long v = single ? f.applySingleRounding(acc[i]) : f.apply(acc[i]);
                            want[i] = (int) Math.max(lo, Math.min(255, zy + v));
                        }
                        String shape = n + " x " + in + " -> " + out + (single ? ", single" : ", double");
                        assertArrayEquals(want, p.codes(x, n, init, cols, zy, lo, 255, true), "vector, " + shape);
                        assertArrayEquals(want, p.codes(x, n, init, cols, zy, lo, 255, false), "plain, " + shape);
                    }
                }
            }
        }
    }
}
