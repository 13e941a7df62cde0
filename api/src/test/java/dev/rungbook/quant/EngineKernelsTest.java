package dev.rungbook.quant;

import static org.junit.jupiter.api.Assertions.assertEquals;

import java.util.Arrays;
import java.util.SplittableRandom;
import org.junit.jupiter.api.Test;

/** The engine's element kernels against their plain definitions. */
class EngineKernelsTest {
    @Test
    void nearestCodeIsRintOfTheQuotientBitForBit() {
        SplittableRandom r = new SplittableRandom(41);
        int ties = 0;
        for (int k = 0; k < 1_000_000; k++) {
            double sc = (float) Math.exp(r.nextDouble(-40, 20));
            double z = k % 3 == 0 ? 0.0 : Math.rint(r.nextDouble(-130, 130)) + (k % 7 == 0 ? 0.5 : 0.0);
            float v;
            if (k % 4 == 0) {
                // exact and near ties: (j + 1/2) * sc rounded to float, and its float neighbours
                v = (float) ((Math.rint(r.nextDouble(-200, 200)) + 0.5) * sc);
                v = k % 8 == 0 ? v : (k % 16 == 4 ? Math.nextUp(v) : Math.nextDown(v));
            } else {
                v = (float) (r.nextGaussian() * sc * Math.exp(r.nextDouble(-5, 6)));
            }
            double want = Math.rint(v / sc + z);
            double got = Engine.nearestCode(v, sc, 1 / sc, z);
            if (Math.abs(v / sc + z - Math.floor(v / sc + z) - 0.5) < 1e-6) {
                ties++;
            }
            // Source: the definition rint(v / sc + z) (round half to even, Math.rint), compared bit for bit.
            assertEquals(Double.doubleToRawLongBits(want), Double.doubleToRawLongBits(got),
                    "v " + v + " sc " + sc + " z " + z + ": " + want + " vs " + got);
        }
        assertEquals(true, ties > 10_000, "the cases include ties and near ties: " + ties);
    }

    @Test
    void nearestLevelByTheReciprocalIsTheQuotientsLevel() {
        SplittableRandom r = new SplittableRandom(43);
        float[] levels = dev.rungbook.internal.Nf4.levels();
        double[] mids = Engine.midpoints(levels);
        for (int k = 0; k < 1_000_000; k++) {
            double sc = (float) Math.exp(r.nextDouble(-30, 30));
            float v;
            if (k % 3 == 0) {
                // on and next to a midpoint times the scale
                v = (float) (mids[r.nextInt(levels.length - 1)] * sc);
                v = k % 9 == 0 ? v : (k % 9 == 3 ? Math.nextUp(v) : Math.nextDown(v));
            } else {
                v = (float) (r.nextDouble(-1, 1) * sc);
            }
            // Source: the definition, the level of the quotient v / sc (brute-force count of midpoints below it).
            double y = v / sc;
            int want = 0;
            for (int j = 0; j < levels.length - 1; j++) {
                want += mids[j] < y ? 1 : 0;
            }
            assertEquals(want, Engine.nearestLevel(mids, v, sc, 1 / sc), "v " + v + " sc " + sc);
        }
    }

    @Test
    void countBelowMatchesALinearCount() {
        SplittableRandom r = new SplittableRandom(42);
        for (int len = 0; len <= 40; len++) {
            double[] a = new double[len];
            for (int i = 0; i < len; i++) {
                a[i] = r.nextInt(9) - 4; // repeated values
            }
            Arrays.sort(a);
            float[] levels = new float[len + 1];
            for (int i = 0; i <= len; i++) {
                levels[i] = i;
            }
            double[] padded = Engine.midpoints(levels); // the padded layout: len values, then +Infinity
            System.arraycopy(a, 0, padded, 0, len);
            for (int k = 0; k < 200; k++) {
                double x = k % 5 == 0 ? r.nextInt(11) - 5 : r.nextDouble(-6, 6);
                int want = 0;
                for (double e : a) {
                    want += e < x ? 1 : 0;
                }
                // Source: brute-force count of the entries strictly below x.
                assertEquals(want, Engine.countBelow(padded, x), "length " + len + ", x " + x);
            }
        }
    }
}
