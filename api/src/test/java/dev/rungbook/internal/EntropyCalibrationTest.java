package dev.rungbook.internal;

import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.testing.Fixtures;
import java.util.Random;
import org.junit.jupiter.api.Test;

class EntropyCalibrationTest {

    @Test
    void mergeAndExpandWorkedExample() {
        // Source: check-values.md §10 (published 8-bit inference calibration procedure), expansion example [memory]
        double[] q = EntropyCalibration.mergeAndExpand(new double[] {1, 0, 2, 3, 5, 3, 1, 7}, 2);
        assertArrayEquals(new double[] {2, 0, 2, 2, 4, 4, 4, 4}, q, 0);
        // a remainder goes to the last level: 10 bins into 3 levels of 3, 3 and 4 bins
        q = EntropyCalibration.mergeAndExpand(new double[] {3, 0, 0, 1, 1, 1, 0, 2, 2, 4}, 3);
        assertArrayEquals(new double[] {3, 0, 0, 1, 1, 1, 0, 8 / 3.0, 8 / 3.0, 8 / 3.0}, q, 1e-15);
    }

    /**
     * A direct, separately written reference of the procedure in check-values.md §10: explicit lists, explicit
     * normalisation, explicit KL sum.
     */
    private static double[] reference(double[] bins, int levels) {
        double bestKl = Double.POSITIVE_INFINITY;
        int bestI = -1;
        for (int i = levels; i < bins.length; i++) {
            double[] p = java.util.Arrays.copyOf(bins, i);
            double outliers = 0;
            for (int j = i; j < bins.length; j++) {
                outliers += bins[j];
            }
            p[i - 1] += outliers;
            double[] raw = java.util.Arrays.copyOf(bins, i);
            double[] q = new double[i];
            int m = i / levels;
            for (int lv = 0; lv < levels; lv++) {
                int start = lv * m;
                int stop = lv == levels - 1 ? i : start + m;
                double mass = 0;
                int count = 0;
                for (int j = start; j < stop; j++) {
                    mass += raw[j];
                    count += p[j] != 0 ? 1 : 0;
                }
                for (int j = start; j < stop; j++) {
                    q[j] = p[j] != 0 ? mass / count : 0;
                }
            }
            double sp = java.util.Arrays.stream(p).sum();
            double sq = java.util.Arrays.stream(q).sum();
            double kl = 0;
            for (int j = 0; j < i; j++) {
                if (p[j] != 0) {
                    kl += (p[j] / sp) * Math.log((p[j] / sp) / (q[j] / sq));
                }
            }
            if (kl < bestKl) {
                bestKl = kl;
                bestI = i;
            }
        }
        return new double[] {bestI, bestKl};
    }

    @Test
    void gaussianThresholdMatchesReferenceAndIsPlausible() {
        float[] data = Fixtures.gaussian(71, 1_000_000);
        double maxAbs = 0;
        for (float v : data) {
            maxAbs = Math.max(maxAbs, Math.abs(v));
        }
        double[] h = EntropyCalibration.histogramOfAbs(data, 2048, maxAbs);
        EntropyCalibration.Result r = EntropyCalibration.threshold(h, maxAbs / 2048);
        // Source: check-values.md §10 (published 8-bit inference calibration procedure), re-implemented directly
        double[] ref = reference(h, 128);
        assertEquals((int) ref[0], r.bestBin());
        assertEquals(ref[1], r.divergence(), 1e-12);
        assertEquals((r.bestBin() + 0.5) * maxAbs / 2048, r.threshold(), 1e-15);
        // common practice: 8-bit entropy thresholds on Gaussian data fall between 2 and 5 sigma
        assertTrue(r.threshold() > 2 && r.threshold() < 5, "threshold " + r.threshold());
        EntropyCalibration.Result direct = EntropyCalibration.threshold(data);
        assertEquals(r, direct);
    }

    @Test
    void laplaceThresholdMatchesReference() {
        Random rnd = Fixtures.random(72);
        float[] data = new float[200_000];
        for (int i = 0; i < data.length; i++) {
            double u = rnd.nextDouble() - 0.5;
            data[i] = (float) (-Math.signum(u) * Math.log(1 - 2 * Math.abs(u)));
        }
        double[] h = EntropyCalibration.histogramOfAbs(data, 2048, 20.0);
        EntropyCalibration.Result r = EntropyCalibration.threshold(h, 20.0 / 2048);
        double[] ref = reference(h, 128);
        assertEquals((int) ref[0], r.bestBin());
        assertEquals(ref[1], r.divergence(), 1e-12);
    }

    @Test
    void klDivergenceMatchesDirectSum() {
        double[] p = {0.1, 0.4, 0, 0.5};
        double[] q = {0.3, 0.3, 0.2, 0.2};
        // Source: textbook definition sum p ln(p/q) over p > 0
        double expected = 0.1 * Math.log(0.1 / 0.3) + 0.4 * Math.log(0.4 / 0.3) + 0.5 * Math.log(0.5 / 0.2);
        assertEquals(expected, EntropyCalibration.klDivergence(p, q), 1e-15);
        // unnormalised inputs are normalised first
        assertEquals(expected, EntropyCalibration.klDivergence(new double[] {1, 4, 0, 5}, new double[] {3, 3, 2, 2}),
                1e-15);
        assertEquals(Double.POSITIVE_INFINITY, EntropyCalibration.klDivergence(new double[] {1, 1},
                new double[] {1, 0}));
        assertEquals(0.0, EntropyCalibration.klDivergence(p, p), 1e-15);
    }

    @Test
    void fewerNonEmptyBinsThanLevelsClipNothing() {
        float[] data = {0.1f, 0.2f, 0.3f, 0.4f, 0.5f, -0.5f, 0.2f};
        double[] h = EntropyCalibration.histogramOfAbs(data, 2048, 1.0);
        EntropyCalibration.Result r = EntropyCalibration.threshold(h, 1.0 / 2048);
        // 0.5 lands in bin 1024: keep bins [0, 1025); every level holds at most one non-empty bin, so Q = P
        assertEquals(1025, r.bestBin());
        assertEquals(0.0, r.divergence(), 1e-15);
        assertEquals(1025.0 / 2048, r.threshold(), 1e-15);
        // the raw procedure would pick i = 205 (everything clipped into the bin of 0.1, divergence 0)
        assertEquals(205, (int) reference(h, 128)[0]);
        // a sparse histogram whose data fit in fewer bins than levels
        double[] few = new double[2048];
        few[3] = 5;
        few[40] = 1;
        EntropyCalibration.Result f = EntropyCalibration.threshold(few, 0.5);
        assertEquals(41, f.bestBin());
        assertEquals(20.5, f.threshold(), 0);
        assertEquals(0.0, f.divergence(), 0);
    }

    @Test
    void candidatesThatCannotRepresentTheOutliersAreSkipped() {
        double[] h = new double[2048];
        for (int j = 0; j < 200; j++) {
            h[j] = 100;
        }
        h[2047] = 1;
        // e.g. i = 300: its last level covers bins [254, 300), all empty, but P[299] holds the outlier: Q = 0 < P
        EntropyCalibration.Result r = EntropyCalibration.threshold(h, 0.01);
        double[] ref = reference(h, 128);
        assertEquals((int) ref[0], r.bestBin());
        assertTrue(Double.isFinite(r.divergence()));
        assertTrue(r.bestBin() >= 200 && r.bestBin() <= 256, "bin " + r.bestBin());
    }

    @Test
    void allZeroInputAndBadArguments() {
        assertEquals(new EntropyCalibration.Result(0, 0, 0), EntropyCalibration.threshold(new float[100]));
        assertEquals(new EntropyCalibration.Result(0, 0, 0), EntropyCalibration.threshold(new double[2048], 1.0));
        assertThrows(IllegalArgumentException.class, () -> EntropyCalibration.threshold(new double[128], 1.0));
        assertThrows(IllegalArgumentException.class, () -> EntropyCalibration.threshold(new double[2048], 0.0));
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                () -> EntropyCalibration.threshold(new float[] {1f, Float.NaN}));
        assertTrue(e.getMessage().contains("index 1"), e.getMessage());
        assertThrows(IllegalArgumentException.class, () -> EntropyCalibration.histogramOfAbs(new float[1], 10, 0));
        double[] h = EntropyCalibration.histogramOfAbs(new float[] {-1f, 0.99f, 0f, 3f}, 4, 1.0);
        assertArrayEquals(new double[] {1, 0, 0, 3}, h, 0); // |x| >= max goes to the last bin
    }
}
