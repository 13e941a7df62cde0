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
            float inv = (float) Math.exp(r.nextDouble(-10, 10));
            double[] ws = Fused.scalarErrorSums(v, d, from, to, inv);
            double[] gs = VectorLanes.errorSums(v, d, from, to, inv);
            assertArrayEquals(ws, gs, 0.0, "error sums, n " + n);
            assertEquals(Double.doubleToRawLongBits(ws[0]), Double.doubleToRawLongBits(gs[0]));
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
}
