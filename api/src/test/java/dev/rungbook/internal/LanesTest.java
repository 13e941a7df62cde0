package dev.rungbook.internal;

import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertTrue;

import java.util.SplittableRandom;
import org.junit.jupiter.api.Test;

/**
 * The shared reductions: the Vector API path (present in the test JVM, which runs with
 * {@code --add-modules jdk.incubator.vector}) against the plain loops, bit for bit, and the plain loops against
 * their definitions.
 */
class LanesTest {
    private static float[] values(SplittableRandom r, int n) {
        float[] v = new float[n];
        for (int i = 0; i < n; i++) {
            int k = r.nextInt(20);
            v[i] = k == 0 ? -0.0f : k == 1 ? 0.0f : (float) (r.nextGaussian() * Math.exp(r.nextDouble(-20, 20)));
        }
        return v;
    }

    @Test
    void theVectorPathIsPresentInTheTestJvm() {
        assertTrue(Lanes.vectorised(), "surefire runs with --add-modules jdk.incubator.vector");
    }

    @Test
    void vectorReductionsEqualThePlainLoopsBitForBit() {
        SplittableRandom r = new SplittableRandom(5);
        for (int n = 0; n < 300; n++) {
            float[] v = values(r, n + 7);
            int from = n % 7;
            int to = from + n;
            for (float[] start : new float[][] {{0f, 0f}, {Float.POSITIVE_INFINITY, Float.NEGATIVE_INFINITY},
                {-0.0f, -0.0f}}) {
                float[] want = Lanes.scalarMinMax(v, from, to, start[0], start[1]);
                float[] got = VectorLanes.minMax(v, from, to, start[0], start[1]);
                assertEquals(Float.floatToRawIntBits(want[0]), Float.floatToRawIntBits(got[0]), "min, n " + n);
                assertEquals(Float.floatToRawIntBits(want[1]), Float.floatToRawIntBits(got[1]), "max, n " + n);
            }
            assertEquals(Float.floatToRawIntBits(Lanes.scalarMaxAbs(v, from, to)),
                    Float.floatToRawIntBits(VectorLanes.maxAbs(v, from, to)), "max |v|, n " + n);
            float[] d = values(r, n + 7);
            // error sums of segments: one of n values, then segments of 1..n values filling [from, to)
            for (int m : new int[] {n, 1 + n % 13, 1 + n % 70}) {
                if (m == 0) {
                    continue;
                }
                int count = n / m;
                float[] scales = new float[count + 1];
                for (int k = 0; k < scales.length; k++) {
                    scales[k] = (float) Math.exp(r.nextDouble(-10, 10));
                }
                double[] we = new double[count + 1];
                double[] wsig = new double[count + 1];
                double[] ge = new double[count + 1];
                double[] gsig = new double[count + 1];
                Fused.scalarSegmentSums(v, d, from, count, m, scales, 1, we, wsig);
                VectorLanes.segmentSums(v, d, from, count, m, scales, 1, ge, gsig);
                assertArrayEquals(we, ge, 0.0, "error sums, n " + n + ", m " + m);
                assertArrayEquals(wsig, gsig, 0.0, "signal sums, n " + n + ", m " + m);
                for (int k = 1; k <= count; k++) {
                    double[] one = Fused.scalarErrorSums(v, d, from + (k - 1) * m, from + k * m, 1f / scales[k]);
                    assertEquals(Double.doubleToRawLongBits(one[0] * ((double) scales[k] * scales[k])),
                            Double.doubleToRawLongBits(ge[k]), "segment " + k + " of n " + n);
                }
            }
        }
    }

    @Test
    void nanAndInfinityPropagate() {
        for (int n = 1; n < 70; n++) {
            for (int at = 0; at < n; at += 5) {
                float[] v = new float[n];
                v[at] = Float.NaN;
                // Source: Math.min/Math.max return NaN if either argument is NaN (java.lang.Math Javadoc).
                assertTrue(Float.isNaN(VectorLanes.minMax(v, 0, n, 0f, 0f)[0]), "min with NaN at " + at);
                assertTrue(Float.isNaN(VectorLanes.minMax(v, 0, n, 0f, 0f)[1]), "max with NaN at " + at);
                assertTrue(!Float.isFinite(VectorLanes.maxAbs(v, 0, n)), "max |v| with NaN at " + at);
                v[at] = Float.NEGATIVE_INFINITY;
                assertEquals(Float.POSITIVE_INFINITY, VectorLanes.maxAbs(v, 0, n));
            }
        }
    }

    @Test
    void plainLoopsFollowTheirDefinitions() {
        float[] v = {3f, -0.0f, -2f, 5f};
        // Source: hand-computed; Math.min orders -0.0 below 0.0.
        assertArrayEquals(new float[] {-2f, 5f}, Lanes.scalarMinMax(v, 0, 4, 0f, 0f));
        assertEquals(Float.floatToRawIntBits(-0.0f), Float.floatToRawIntBits(Lanes.scalarMinMax(v, 1, 2, 0f, 0f)[0]));
        assertEquals(5f, Lanes.scalarMaxAbs(v, 0, 4));
        float[] w = new float[70];
        float[] d = new float[70];
        double e = 0;
        double s = 0;
        for (int i = 0; i < 70; i++) {
            w[i] = i * 0.25f;
            d[i] = w[i] - (i % 3) * 0.5f;
            e += Math.pow((i % 3) * 0.5, 2);
            s += Math.pow(i * 0.25, 2);
        }
        double[] got = Fused.scalarErrorSums(w, d, 0, 70, 1f);
        // Source: the sums computed in double (all terms are exact in float here).
        assertEquals(e, got[0], 1e-9);
        assertEquals(s, got[1], 1e-9);
    }

    @Test
    void pairSumsVectorEqualsPlainLoopBitForBit() {
        // Reference: the plain four-lane loop; every length 0..70 covers the tails, plus a long array
        SplittableRandom r = new SplittableRandom(9);
        for (int n = 0; n < 71; n++) {
            assertPairSumsAgree(values(r, n), values(r, n));
        }
        float[] x = values(r, 100_003);
        float[] y = x.clone();
        for (int i = 0; i < y.length; i += 3) {
            y[i] += (float) r.nextGaussian() * Math.abs(y[i]) * 1e-2f;
        }
        assertPairSumsAgree(x, y);
    }

    private static void assertPairSumsAgree(float[] x, float[] y) {
        double[] want = Lanes.scalarPairSums(x, y);
        double[] got = VectorLanes.pairSums(x, y);
        assertEquals(Lanes.PAIR_SUMS_LENGTH, got.length);
        for (int k = 0; k < want.length; k++) {
            assertEquals(Double.doubleToLongBits(want[k]), Double.doubleToLongBits(got[k]),
                    "entry " + k + " of " + x.length + ": " + want[k] + " vs " + got[k]);
        }
    }

    @Test
    void pairSumsMatchExactSums() {
        // Source: exact arithmetic with java.math.BigDecimal (every float and every product of two floats is exact
        // there); the four-lane double sums must agree to a few units of double rounding
        SplittableRandom r = new SplittableRandom(10);
        float[] x = new float[1003];
        float[] y = new float[x.length];
        for (int i = 0; i < x.length; i++) {
            x[i] = (float) r.nextGaussian();
            y[i] = x[i] + (float) (r.nextGaussian() * 0.05);
        }
        java.math.BigDecimal se = java.math.BigDecimal.ZERO;
        java.math.BigDecimal sa = java.math.BigDecimal.ZERO;
        java.math.BigDecimal sxy = java.math.BigDecimal.ZERO;
        double max = 0;
        float xmin = Float.POSITIVE_INFINITY;
        float ymax = Float.NEGATIVE_INFINITY;
        for (int i = 0; i < x.length; i++) {
            java.math.BigDecimal a = new java.math.BigDecimal(x[i]);
            java.math.BigDecimal b = new java.math.BigDecimal(y[i]);
            java.math.BigDecimal e = b.subtract(a);
            se = se.add(e.multiply(e));
            sa = sa.add(e.abs());
            sxy = sxy.add(a.multiply(b));
            max = Math.max(max, e.abs().doubleValue());
            xmin = Math.min(xmin, x[i]);
            ymax = Math.max(ymax, y[i]);
        }
        for (double[] p : new double[][] {Lanes.scalarPairSums(x, y), Lanes.pairSums(x, y)}) {
            assertEquals(se.doubleValue(), p[0], 1e-13 * se.doubleValue());
            assertEquals(sa.doubleValue(), p[1], 1e-13 * sa.doubleValue());
            assertEquals(max, p[2], 0.0);
            assertEquals(sxy.doubleValue(), p[5], 1e-12 * Math.abs(sxy.doubleValue()));
            assertEquals(xmin, p[6], 0.0);
            assertEquals(ymax, p[9], 0.0);
        }
        double[] empty = Lanes.pairSums(new float[0], new float[0]);
        assertEquals(0.0, empty[0]);
        assertEquals(Double.POSITIVE_INFINITY, empty[6]);
        assertEquals(Double.NEGATIVE_INFINITY, empty[9]);
    }
}
