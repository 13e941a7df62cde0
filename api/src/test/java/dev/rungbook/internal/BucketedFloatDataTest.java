package dev.rungbook.internal;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertFalse;
import static org.junit.jupiter.api.Assertions.assertNotNull;
import static org.junit.jupiter.api.Assertions.assertNull;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.testing.Fixtures;
import java.math.BigDecimal;
import java.util.Arrays;
import java.util.Random;
import org.junit.jupiter.api.Test;

/** The codebook's large path without a full sort, checked against the sorted array and the exact program. */
class BucketedFloatDataTest {
    private static final int N = Codebook1D.BUCKETED_MIN_LENGTH + 12_345;
    private static final int MIN_BUCKETS = Codebook1D.COMPRESSED_BINS;

    /** Laplacian draws; every 50th value is a signed zero, and a few are subnormal. */
    private static float[] mixed(long seed) {
        Random r = Fixtures.random(seed);
        float[] v = new float[N];
        for (int i = 0; i < N; i++) {
            double u = r.nextDouble() - 0.5;
            v[i] = (float) (-Math.signum(u) * Math.log(1 - 2 * Math.abs(u)));
            if (i % 50 == 0) {
                v[i] = i % 100 == 0 ? -0.0f : 0.0f;
            } else if (i % 997 == 0) {
                v[i] = (float) (r.nextGaussian() * 1e-40);
            }
        }
        return v;
    }

    /** Half exact zeros, the rest Gaussian with per-draw scales 10^-3 or 10^3 (far-apart clusters). */
    private static float[] sparseTwoScales(long seed) {
        Random r = Fixtures.random(seed);
        float[] v = new float[N];
        for (int i = 0; i < N; i++) {
            v[i] = r.nextBoolean() ? 0f : (float) ((r.nextBoolean() ? 1e-3 : 1e3) * r.nextGaussian());
        }
        return v;
    }

    @Test
    void positionsValuesPrefixSumsAndCountsMatchTheSortedArray() {
        float[] data = mixed(1);
        float[] sorted = data.clone();
        Arrays.sort(sorted); // Source: the JDK's Arrays.sort(float[]) total order (-0.0 before +0.0)
        BucketedFloatData d = BucketedFloatData.of(data, MIN_BUCKETS, "t");
        assertNotNull(d);
        // Lazily: a threshold's bucket is materialised by one pass, not the whole array.
        double t0 = 0.731;
        assertThrows(IllegalStateException.class, () -> d.upperBound(t0));
        d.prepareThresholds(new double[] {t0});
        assertEquals(1, d.passes());
        // The wanted bucket plus margins of 6 WINDOW values either side, far from all N.
        assertTrue(d.materialised() < 12 * Codebook1D.WINDOW + N / 20, d.materialised() + " values sorted");
        assertEquals(upperBound(sorted, t0), d.upperBound(t0));

        d.preparePositions(new int[] {0}, new int[] {N - 1});
        Random r = Fixtures.random(2);
        for (int c = 0; c < 2000; c++) {
            int i = r.nextInt(N);
            assertEquals((double) sorted[i], d.value(i), 0, "position " + i);
            double t = c % 3 == 0 ? sorted[i] : c % 3 == 1 ? 0.5 * ((double) sorted[i] + sorted[Math.min(N - 1, i + 1)])
                    : r.nextGaussian() * 3;
            assertEquals(upperBound(sorted, t), d.upperBound(t), "threshold " + t);
        }
        for (double t : new double[] {0.0, -0.0, -1e-45, 1e-45, Double.MIN_VALUE, -100, 100}) {
            assertEquals(upperBound(sorted, t), d.upperBound(t), "threshold " + t);
        }
        // Prefix sums against BigDecimal sums over the sorted array.
        double[] out = new double[3];
        BigDecimal mu = new BigDecimal(d.mu);
        BigDecimal s = BigDecimal.ZERO;
        BigDecimal q = BigDecimal.ZERO;
        int next = 0;
        for (int i = 0; i <= N; i++) {
            if (i == next) {
                d.prefixAt(i, out);
                assertEquals(i, out[0], 0);
                // Source: exact BigDecimal sums of (x - mu) and (x - mu)^2 over the JDK-sorted values
                assertEquals(s.doubleValue(), out[1], 1e-9 * Math.max(1, q.doubleValue()), "sum at " + i);
                assertEquals(q.doubleValue(), out[2], 1e-12 * Math.max(1, q.doubleValue()), "square at " + i);
                next = i + 1 + r.nextInt(20_000);
            }
            if (i < N) {
                BigDecimal y = new BigDecimal(sorted[i]).subtract(mu);
                s = s.add(y);
                q = q.add(y.multiply(y));
            }
        }
    }

    private static int upperBound(float[] sorted, double t) {
        int lo = 0;
        int hi = sorted.length;
        while (lo < hi) {
            int mid = (lo + hi) >>> 1;
            if (sorted[mid] <= t) {
                lo = mid + 1;
            } else {
                hi = mid;
            }
        }
        return lo;
    }

    @Test
    void fitAgreesWithTheFullSortAndTheExactProgram() {
        for (float[] data : new float[][] {mixed(3), sparseTwoScales(4)}) {
            assertTrue(BucketedFloatData.moreDistinctThan(data, Codebook1D.EXACT_LIMIT));
            assertNotNull(BucketedFloatData.of(data, MIN_BUCKETS, "t"), "the bucketed path is taken");
            float[] sorted = data.clone();
            FloatSort.sort(sorted);
            double[][] vc = FloatSort.distinctWithCounts(sorted);
            for (int k : new int[] {3, 8}) {
                Codebook1D.Result bucketed = Codebook1D.fit(data, k, null, "bucketed");
                Codebook1D.Result bySort = Codebook1D.fitBySorting(data, k, null, "sorted");
                // Source: the exact program on distinct values with counts, itself checked against exhaustive
                // search over all partitions in Codebook1DTest
                Codebook1D.Result exact = Codebook1D.fitExact(vc[0], vc[1], k, null, "exact");
                assertTrue(bucketed.mse() >= exact.mse() * (1 - 1e-12), "k=" + k + " cannot beat the optimum");
                assertEquals(exact.mse(), bucketed.mse(), 1e-11 * exact.mse(), "k=" + k);
                assertEquals(bySort.mse(), bucketed.mse(), 1e-11 * exact.mse(), "k=" + k);
                double spread = sorted[N - 1] - sorted[0];
                for (int j = 0; j < k; j++) {
                    assertEquals(exact.levels()[j], bucketed.levels()[j], 1e-9 * spread, "k=" + k + " level " + j);
                }
            }
        }
    }

    @Test
    void narrowRangesGoThroughTheFullSort() {
        Random r = Fixtures.random(5);
        float[] data = new float[N];
        for (int i = 0; i < N; i++) {
            data[i] = 1000f + (float) r.nextGaussian(); // a few buckets of 1.0 width each
        }
        assertTrue(BucketedFloatData.moreDistinctThan(data, Codebook1D.EXACT_LIMIT));
        assertNull(BucketedFloatData.of(data, MIN_BUCKETS, "t"));
        Codebook1D.Result a = Codebook1D.fit(data, 16, null, "narrow");
        Codebook1D.Result b = Codebook1D.fitBySorting(data, 16, null, "narrow");
        assertEquals(b.mse(), a.mse(), 0);
    }

    @Test
    void refusesNonFiniteValuesNamingTheIndex() {
        for (float bad : new float[] {Float.NaN, Float.POSITIVE_INFINITY, Float.NEGATIVE_INFINITY}) {
            float[] data = mixed(6);
            data[200_001] = bad;
            IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                    () -> Codebook1D.fit(data, 16, null, "fc2.weight"));
            assertEquals("fc2.weight: value at index 200001 is " + bad, e.getMessage());
        }
    }

    @Test
    void countsDistinctValuesWithSignedZerosAsOne() {
        float[] v = {0f, -0.0f, 1f, 2f, 1f, -0.0f};
        assertFalse(BucketedFloatData.moreDistinctThan(v, 3));
        assertTrue(BucketedFloatData.moreDistinctThan(v, 2));
        float[] repeated = new float[N];
        for (int i = 0; i < N; i++) {
            repeated[i] = (i % 20_000) * 0.001f - 10f;
        }
        assertFalse(BucketedFloatData.moreDistinctThan(repeated, 20_000));
        assertTrue(BucketedFloatData.moreDistinctThan(repeated, 19_999));
    }
}
