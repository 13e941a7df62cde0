package dev.rungbook.metrics;

import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.tensor.DType;
import dev.rungbook.tensor.Tensor;
import dev.rungbook.tensor.TensorView;
import dev.rungbook.testing.Fixtures;
import java.math.BigDecimal;
import java.math.MathContext;
import java.util.List;
import java.util.Random;
import java.util.concurrent.atomic.AtomicInteger;
import org.apache.commons.math3.distribution.TDistribution;
import org.apache.commons.math3.random.Well19937c;
import org.apache.commons.math3.stat.descriptive.DescriptiveStatistics;
import org.junit.jupiter.api.Test;
import tech.tablesaw.api.Table;

class TensorStatsTest {
    /** Relative tolerance for double statistics of float data computed by two careful double algorithms. */
    private static final double REL = 1e-10;

    // Source for every moment check in this class: commons-math3 3.6.1 DescriptiveStatistics (sample variance with
    // divisor n - 1, bias-corrected excess kurtosis), fed the same float values widened to double.
    private static DescriptiveStatistics reference(float[] v) {
        DescriptiveStatistics d = new DescriptiveStatistics();
        for (float f : v) {
            if (Float.isFinite(f)) {
                d.addValue(f);
            }
        }
        return d;
    }

    private static void assertClose(double expected, double actual, double rel, String what) {
        if (Double.isNaN(expected)) {
            assertTrue(Double.isNaN(actual), what + ": expected NaN, got " + actual);
            return;
        }
        double tol = rel * Math.max(1, Math.abs(expected));
        assertEquals(expected, actual, tol, what);
    }

    private static void assertMatchesReference(float[] v, TensorStats s) {
        DescriptiveStatistics d = reference(v);
        assertEquals(d.getN(), s.count(), "count");
        assertEquals(d.getMin(), s.min(), 0, "min");
        assertEquals(d.getMax(), s.max(), 0, "max");
        assertClose(d.getMean(), s.mean(), REL, "mean");
        assertClose(d.getVariance(), s.variance(), REL, "variance");
        assertClose(d.getStandardDeviation(), s.std(), REL, "std");
        assertClose(d.getKurtosis(), s.kurtosis(), 1e-8, "kurtosis");
        assertEquals(Math.max(Math.abs(d.getMin()), Math.abs(d.getMax())), s.absMax(), 0, "absmax");
    }

    private static double directBeyond(float[] v, double k) {
        DescriptiveStatistics d = reference(v);
        double m = d.getMean();
        double limit = k * d.getStandardDeviation();
        int out = 0;
        for (float f : v) {
            if (Float.isFinite(f) && Math.abs(f - m) > limit) {
                out++;
            }
        }
        return (double) out / d.getN();
    }

    @Test
    void gaussianMatchesDescriptiveStatistics() {
        float[] v = Fixtures.gaussian(11, 20_000);
        for (int i = 0; i < v.length; i++) {
            v[i] = 0.05f * v[i] + 0.01f;
        }
        TensorStats s = TensorStats.of(Tensor.of(v, 100, 200));
        assertMatchesReference(v, s);
        assertEquals(v.length, s.size());
        assertEquals(0, s.nanCount());
        assertEquals(0, s.infCount());
        // Gaussian excess kurtosis is 0; with n = 20000 its standard error is about sqrt(24 / n) = 0.035.
        assertEquals(0, s.kurtosis(), 0.15);
        assertEquals(directBeyond(v, 3), s.beyondSd(), 0);
        assertEquals(directBeyond(v, 2), s.beyondSd(2), 0);
        assertEquals(directBeyond(v, 0.5), s.beyondSd(0.5), 0);
    }

    @Test
    void heavyTailedStudentTMatchesDescriptiveStatistics() {
        TDistribution t = new TDistribution(new Well19937c(7), 5);
        float[] v = new float[30_000];
        for (int i = 0; i < v.length; i++) {
            v[i] = (float) t.sample();
        }
        TensorStats s = TensorStats.of(Tensor.of(v, v.length));
        assertMatchesReference(v, s);
        // Student t with 5 degrees of freedom has excess kurtosis 6 / (nu - 4) = 6; the sample value is noisy but
        // clearly heavy-tailed. Source: standard moments of Student's t distribution.
        assertTrue(s.kurtosis() > 2, "kurtosis " + s.kurtosis());
        assertEquals(directBeyond(v, 3), s.beyondSd(), 0);
        assertTrue(s.beyondSd() > 0.0027, "heavier tails than a Gaussian: " + s.beyondSd());
    }

    @Test
    void largeOffsetKeepsTheVariance() {
        // Values 4096 + j/256 for j in 0..255: float32 holds them exactly; a naive E[x^2] - E[x]^2 in float loses all
        // digits. Source: the exact variance in BigDecimal arithmetic, and commons-math3.
        Random r = Fixtures.random(5);
        float[] v = new float[50_000];
        for (int i = 0; i < v.length; i++) {
            v[i] = 4096f + r.nextInt(256) / 256f;
        }
        TensorStats s = TensorStats.of(Tensor.of(v, v.length));
        assertMatchesReference(v, s);
        BigDecimal sum = BigDecimal.ZERO;
        for (float f : v) {
            sum = sum.add(new BigDecimal(f));
        }
        BigDecimal n = BigDecimal.valueOf(v.length);
        BigDecimal mean = sum.divide(n, MathContext.DECIMAL128);
        BigDecimal ss = BigDecimal.ZERO;
        for (float f : v) {
            BigDecimal d = new BigDecimal(f).subtract(mean);
            ss = ss.add(d.multiply(d));
        }
        double exactVar = ss.divide(n.subtract(BigDecimal.ONE), MathContext.DECIMAL128).doubleValue();
        assertEquals(mean.doubleValue(), s.mean(), 1e-12 * 4096);
        assertEquals(exactVar, s.variance(), 1e-12 * exactVar);
    }

    @Test
    void constantData() {
        float[] v = new float[100];
        java.util.Arrays.fill(v, 0.1f);
        TensorStats s = TensorStats.of(Tensor.of(v, 10, 10));
        DescriptiveStatistics d = reference(v);
        assertEquals(d.getMean(), s.mean(), 0);
        assertEquals(0.0, s.std(), 0);
        assertEquals(0.0, d.getStandardDeviation(), 0);
        // commons-math3's DescriptiveStatistics kurtosis of constant data is 0/0 = NaN; so is ours.
        assertTrue(Double.isNaN(d.getKurtosis()));
        assertTrue(Double.isNaN(s.kurtosis()));
        assertEquals(0.0, s.beyondSd(), 0);
        Histogram h = s.histogram(8);
        assertEquals(100, h.total());
        assertTrue(h.lo() < 0.1f && h.hi() > 0.1f, h.toString());
    }

    @Test
    void oneValue() {
        float[] v = {2.5f};
        TensorStats s = TensorStats.of(Tensor.of(v, 1));
        DescriptiveStatistics d = reference(v);
        assertEquals(1, s.count());
        assertEquals(2.5, s.min(), 0);
        assertEquals(2.5, s.max(), 0);
        assertEquals(d.getMean(), s.mean(), 0);
        // Deliberate difference: commons-math3 reports a standard deviation of 0 for one value; a sample of one has
        // no spread to measure, so we report NaN (class Javadoc).
        assertEquals(0.0, d.getStandardDeviation(), 0);
        assertTrue(Double.isNaN(s.std()));
        assertTrue(Double.isNaN(s.variance()));
        assertTrue(Double.isNaN(s.kurtosis()));
        assertTrue(Double.isNaN(s.beyondSd()));
        assertTrue(Double.isNaN(s.beyondSd(1)));
    }

    @Test
    void twoAndThreeValues() {
        float[] two = {1f, -3f};
        assertMatchesReference(two, TensorStats.of(Tensor.of(two, 2)));
        float[] three = {1f, -3f, 7.5f};
        TensorStats s3 = TensorStats.of(Tensor.of(three, 3));
        assertMatchesReference(three, s3);
        assertTrue(Double.isNaN(s3.kurtosis()), "kurtosis needs n >= 4");
        float[] four = {1f, -3f, 7.5f, 0.25f};
        assertMatchesReference(four, TensorStats.of(Tensor.of(four, 4)));
    }

    @Test
    void nanAndInfAreCountedAndLeftOutOfTheMoments() {
        float[] v = Fixtures.gaussian(3, 1000);
        v[5] = Float.NaN;
        v[17] = Float.POSITIVE_INFINITY;
        v[400] = Float.NEGATIVE_INFINITY;
        v[999] = Float.NaN;
        v[0] = Float.NaN;
        TensorStats s = TensorStats.of(Tensor.of(v, 10, 100));
        assertEquals(3, s.nanCount());
        assertEquals(2, s.infCount());
        assertEquals(995, s.count());
        assertEquals(1000, s.size());
        assertMatchesReference(v, s);
        assertEquals(995, s.histogram().total());
        assertEquals(directBeyond(v, 3), s.beyondSd(), 0);
    }

    @Test
    void allNanGivesNanStatistics() {
        float[] v = {Float.NaN, Float.NaN, Float.NaN};
        TensorStats s = TensorStats.of(Tensor.of(v, 3));
        assertEquals(0, s.count());
        assertEquals(3, s.nanCount());
        for (double x : new double[] {s.min(), s.max(), s.mean(), s.std(), s.absMax(), s.kurtosis(), s.beyondSd()}) {
            assertTrue(Double.isNaN(x), "expected NaN, got " + x);
        }
        Histogram h = s.histogram(4);
        assertEquals(0, h.total());
        assertEquals(4, h.bins());
    }

    @Test
    void emptyTensor() {
        TensorStats s = TensorStats.of(Tensor.of(new float[0], 0, 5));
        assertEquals(0, s.count());
        assertEquals(0, s.size());
        assertTrue(Double.isNaN(s.mean()));
    }

    @Test
    void beyondSdRejectsBadK() {
        TensorStats s = TensorStats.of(Tensor.of(new float[] {1, 2, 3}, 3));
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class, () -> s.beyondSd(-1));
        assertTrue(e.getMessage().contains("-1"), e.getMessage());
        assertThrows(IllegalArgumentException.class, () -> s.beyondSd(Double.NaN));
    }

    @Test
    void perChannelEqualsStatsOfEachChannelView() {
        float[] v = Fixtures.gaussian(21, 4 * 6 * 5);
        for (int i = 0; i < v.length; i++) {
            v[i] *= 1 + (i % 7); // channels of different spread
        }
        Tensor t = Tensor.of(v, 4, 6, 5).withName("blk.w");
        for (int axis = 0; axis < 3; axis++) {
            List<TensorStats> per = TensorStats.perChannel(t, axis);
            assertEquals(t.dim(axis), per.size());
            for (int c = 0; c < per.size(); c++) {
                TensorView view = t.channel(axis, c);
                TensorStats expected = TensorStats.of(view);
                TensorStats got = per.get(c);
                assertEquals(expected.count(), got.count());
                assertEquals(expected.mean(), got.mean(), 0);
                assertEquals(expected.variance(), got.variance(), 0);
                assertEquals(expected.kurtosis(), got.kurtosis(), 0);
                assertEquals(expected.beyondSd(1), got.beyondSd(1), 0);
                assertEquals(c, got.index());
                assertEquals(expected.histogram(5), got.histogram(5));
                assertMatchesReference(view.toFloatArray(), got);
                assertTrue(got.label().contains("channel " + c + " of axis " + axis), got.label());
            }
        }
    }

    @Test
    void perChannelTableHasOneRowPerChannel() {
        float[] v = Fixtures.gaussian(4, 3 * 50);
        v[60] = Float.NaN;
        Tensor t = Tensor.of(v, 3, 50).withName("fc.weight");
        Table table = TensorStats.perChannelTable(t, 0);
        assertEquals(List.of("tensor", "channel", "count", "min", "max", "mean", "std", "absmax", "kurtosis",
                "beyond3sd", "nan", "inf"), table.columnNames());
        assertEquals(3, table.rowCount());
        List<TensorStats> per = TensorStats.perChannel(t, 0);
        for (int c = 0; c < 3; c++) {
            assertEquals("fc.weight", table.stringColumn("tensor").get(c));
            assertEquals(c, table.intColumn("channel").getInt(c));
            assertEquals(per.get(c).count(), table.intColumn("count").getInt(c));
            assertEquals(per.get(c).std(), table.doubleColumn("std").getDouble(c), 0);
            assertEquals(per.get(c).nanCount(), table.intColumn("nan").getInt(c));
        }
        assertEquals(49, table.intColumn("count").getInt(1));
        assertEquals(1, table.intColumn("nan").getInt(1));
        assertThrows(IllegalArgumentException.class, () -> TensorStats.perChannelTable(t, 2));
    }

    @Test
    void toTableHasPlainColumnsAndOneRow() {
        float[] v = Fixtures.gaussian(8, 64);
        Tensor t = Tensor.of(v, 8, 8).withName("emb").withDType(DType.BF16);
        TensorStats s = TensorStats.of(t);
        Table table = s.toTable();
        assertEquals(List.of("tensor", "dtype", "shape", "count", "min", "max", "mean", "std", "absmax", "kurtosis",
                "beyond3sd", "nan", "inf"), table.columnNames());
        assertEquals(1, table.rowCount());
        assertEquals("emb", table.stringColumn("tensor").get(0));
        assertEquals("BF16", table.stringColumn("dtype").get(0));
        assertEquals("[8, 8]", table.stringColumn("shape").get(0));
        assertEquals(64, table.intColumn("count").getInt(0));
        assertEquals(s.mean(), table.doubleColumn("mean").getDouble(0), 0);
        assertEquals(s.kurtosis(), table.doubleColumn("kurtosis").getDouble(0), 0);
        assertEquals(s.beyondSd(), table.doubleColumn("beyond3sd").getDouble(0), 0);
        // Undefined statistics become missing values, not numbers.
        Table one = TensorStats.of(Tensor.of(new float[] {1f}, 1)).toTable();
        assertTrue(one.doubleColumn("std").isMissing(0));
        assertEquals("(unnamed)", one.stringColumn("tensor").get(0));
    }

    @Test
    void toStringIsOneCompactLine() {
        TensorStats s = TensorStats.of(Tensor.of(new float[] {1, 2, 3, 4, 100}, 5).withName("w"));
        String text = s.toString();
        assertTrue(text.startsWith("tensor 'w' [5] F32: n=5 min=1.000 max=100.0 mean=22.00"), text);
        assertTrue(text.contains("nan=0 inf=0"), text);
        assertTrue(!text.contains("\n"));
    }

    @Test
    void lazyTensorIsLoadedOnce() {
        AtomicInteger loads = new AtomicInteger();
        Tensor t = Tensor.lazy("lazy.w", DType.F16, new int[] {2, 2}, () -> {
            loads.incrementAndGet();
            return new float[] {1, 2, 3, 4};
        });
        TensorStats s = TensorStats.of(t);
        assertEquals(2.5, s.mean(), 0);
        s.histogram(3);
        s.beyondSd(1);
        assertEquals(1, loads.get());
        assertEquals(DType.F16, s.dtype());
        assertArrayEquals(new int[] {2, 2}, s.shape());
    }
}
