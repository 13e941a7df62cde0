package dev.rungbook.metrics;

import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.tensor.Tensor;
import dev.rungbook.testing.Fixtures;
import java.util.Random;
import org.apache.commons.math3.stat.descriptive.rank.Percentile;
import org.junit.jupiter.api.Test;
import tech.tablesaw.api.Table;

class TensorStatsHistogramTest {
    // Source for every count check: a direct count of the values against the published edges, by the documented
    // rule edges[i] <= x < edges[i + 1] (last bin closed).
    private static long[] directCount(float[] v, double[] edges) {
        int bins = edges.length - 1;
        long[] c = new long[bins];
        for (float f : v) {
            if (!Float.isFinite(f)) {
                continue;
            }
            for (int i = 0; i < bins; i++) {
                boolean last = i == bins - 1;
                if (f >= edges[i] && (f < edges[i + 1] || (last && f == edges[i + 1]))) {
                    c[i]++;
                    break;
                }
            }
        }
        return c;
    }

    @Test
    void countsEqualADirectCount() {
        float[] v = Fixtures.gaussian(2, 5000);
        v[10] = Float.NaN;
        v[11] = Float.NEGATIVE_INFINITY;
        Tensor t = Tensor.of(v, 50, 100);
        for (int bins : new int[] {1, 2, 7, 64, 333}) {
            Histogram h = TensorStats.of(t).histogram(bins);
            assertEquals(bins, h.bins());
            assertArrayEquals(directCount(v, h.edges()), h.counts(), "bins " + bins);
            assertEquals(4998, h.total());
            assertEquals(0, h.below() + h.above());
            assertTrue(h.count(0) > 0 && h.count(bins - 1) > 0, "min and max fall in the end bins");
        }
        assertEquals(TensorStats.DEFAULT_BINS, TensorStats.of(t).histogram().bins());
        assertEquals(Histogram.of(t, 64), TensorStats.of(t).histogram());
    }

    @Test
    void valuesOnEdgesGoToTheUpperBin() {
        // Quantized data sit exactly on bin edges: 0, 0.25, ..., 1 with 4 bins over [0, 1].
        float[] v = {0f, 0.25f, 0.25f, 0.5f, 0.75f, 1f, 1f};
        Histogram h = Histogram.of(Tensor.of(v, v.length), 4, 0, 1);
        assertArrayEquals(new double[] {0, 0.25, 0.5, 0.75, 1}, h.edges());
        assertArrayEquals(new long[] {1, 2, 1, 3}, h.counts());
    }

    @Test
    void awkwardRangesStillAgreeWithTheirEdges() {
        // Edges like lo + w*i/bins are inexact; the stored edges must decide, also for values next to them.
        Random r = Fixtures.random(9);
        float[] v = new float[20_000];
        for (int i = 0; i < v.length; i++) {
            v[i] = (float) (0.1 + 0.7 * r.nextInt(1000) / 999.0);
        }
        Histogram h = Histogram.of(Tensor.of(v, v.length), 37, 0.1, 0.8);
        assertArrayEquals(directCount(v, h.edges()), h.counts());
    }

    @Test
    void fixedRangeCountsOutliersSeparately() {
        float[] v = {-5f, -1f, 0f, 0.5f, 1f, 2f, 9f, Float.NaN};
        Histogram h = Histogram.of(Tensor.of(v, v.length), 2, -1, 1);
        assertEquals(1, h.below());
        assertEquals(2, h.above());
        assertArrayEquals(new long[] {1, 3}, h.counts());
        assertEquals(3, h.maxCount());
        assertEquals(-0.5, h.center(0), 0);
    }

    @Test
    void rejectsBadBinsAndRanges() {
        Tensor t = Tensor.of(new float[] {1, 2}, 2);
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                () -> TensorStats.of(t).histogram(0));
        assertTrue(e.getMessage().contains("got 0"), e.getMessage());
        assertThrows(IllegalArgumentException.class, () -> Histogram.of(t, Integer.MAX_VALUE));
        assertThrows(IllegalArgumentException.class, () -> Histogram.of(t, 4, 1, 1));
        assertThrows(IllegalArgumentException.class, () -> Histogram.of(t, 4, 0, Double.POSITIVE_INFINITY));
    }

    @Test
    void extremeFloatsDoNotOverflow() {
        float[] v = {-Float.MAX_VALUE, 0f, Float.MAX_VALUE};
        Histogram h = TensorStats.of(Tensor.of(v, 3)).histogram(2);
        assertArrayEquals(new long[] {1, 2}, h.counts());
        TensorStats s = TensorStats.of(Tensor.of(v, 3));
        // Source: by hand, mean 0 and sample variance (2 * MAX^2) / 2 = MAX^2, in double without overflow.
        assertEquals(0, s.mean(), 0);
        assertEquals((double) Float.MAX_VALUE, s.std(), Math.ulp((double) Float.MAX_VALUE) * 4);
    }

    @Test
    void freedmanDiaconisBinCount() {
        // Source: the Freedman-Diaconis rule (bin width 2 IQR n^(-1/3)), with the quartiles from commons-math3's
        // Percentile using estimation type R_7 (linear interpolation, NumPy's default).
        for (long seed : new long[] {1, 2, 3}) {
            float[] v = Fixtures.gaussian(seed, 3001 + (int) seed * 17);
            double[] d = new double[v.length];
            for (int i = 0; i < v.length; i++) {
                d[i] = v[i];
            }
            Percentile p = new Percentile().withEstimationType(Percentile.EstimationType.R_7);
            double iqr = p.evaluate(d, 75) - p.evaluate(d, 25);
            TensorStats s = TensorStats.of(Tensor.of(v, v.length));
            int expected = (int) Math.ceil((s.max() - s.min()) / (2 * iqr / Math.cbrt(v.length)));
            assertEquals(expected, s.freedmanDiaconisBins(10_000));
            assertEquals(Math.min(expected, 10), s.freedmanDiaconisBins(10));
        }
        float[] sparse = new float[100];
        sparse[7] = 1f;
        assertEquals(256, TensorStats.of(Tensor.of(sparse, 100)).freedmanDiaconisBins(256), "IQR 0: the cap");
        assertEquals(1, TensorStats.of(Tensor.of(new float[] {3, 3, 3}, 3)).freedmanDiaconisBins(256));
        assertThrows(IllegalArgumentException.class,
                () -> TensorStats.of(Tensor.of(sparse, 100)).freedmanDiaconisBins(0));
    }

    @Test
    void tableHasOneRowPerBin() {
        Histogram h = Histogram.of(Tensor.of(new float[] {0, 1, 2, 3}, 4), 3);
        Table t = h.toTable();
        assertEquals(3, t.rowCount());
        assertEquals(java.util.List.of("lower", "upper", "count"), t.columnNames());
        assertEquals(2L, t.longColumn("count").getLong(2));
        assertTrue(h.toString().startsWith("Histogram 3 bins [0.000, 3.000] total 4"), h.toString());
    }
}
