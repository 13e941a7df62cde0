package dev.rungbook.metrics;

import dev.rungbook.internal.TensorAccess;
import dev.rungbook.tensor.Tensor;
import java.util.Arrays;
import java.util.Locale;
import tech.tablesaw.api.DoubleColumn;
import tech.tablesaw.api.LongColumn;
import tech.tablesaw.api.Table;

/**
 * Counts of values in equal-width bins over a closed range {@code [lo, hi]}: an immutable value.
 *
 * <p>Bin {@code i} holds the values {@code x} with {@code edges[i] <= x < edges[i + 1]}; the last bin also holds
 * {@code x == hi}. The edges are {@code lo + (hi - lo) * i / bins} computed in double, with {@code edges[bins] = hi}
 * exactly, and a value is counted in the bin whose edges (as stored) enclose it, so a direct count against
 * {@link #edges()} always agrees with {@link #counts()}. Finite values outside the range are counted in
 * {@link #below()} and {@link #above()}; NaN and infinite values are not counted anywhere (see
 * {@link TensorStats#nanCount()} and {@link TensorStats#infCount()}).
 */
public final class Histogram {
    /** The most bins a histogram may have (guards against an accidental huge allocation). */
    public static final int MAX_BINS = 1 << 20;

    private final double[] edges;
    private final long[] counts;
    private final long below;
    private final long above;

    private Histogram(double[] edges, long[] counts, long below, long above) {
        this.edges = edges;
        this.counts = counts;
        this.below = below;
        this.above = above;
    }

    /**
     * The histogram of a tensor's finite values in {@code bins} equal bins over the range of its finite values
     * ({@link #range(float[], int, int)} explains the degenerate cases).
     *
     * @throws IllegalArgumentException if {@code bins} is not in [1, {@link #MAX_BINS}]
     */
    public static Histogram of(Tensor t, int bins) {
        float[] v = TensorAccess.data(t);
        double[] r = range(v, 0, v.length);
        return of(v, 0, v.length, bins, r[0], r[1]);
    }

    /**
     * The histogram of a tensor's finite values in {@code bins} equal bins over {@code [lo, hi]}; values outside go
     * to {@link #below()} / {@link #above()}. Use one range for several tensors to compare them bin by bin.
     *
     * @throws IllegalArgumentException if {@code bins} is not in [1, {@link #MAX_BINS}], or {@code lo}, {@code hi}
     *     are not finite with {@code lo < hi}
     */
    public static Histogram of(Tensor t, int bins, double lo, double hi) {
        float[] v = TensorAccess.data(t);
        return of(v, 0, v.length, bins, lo, hi);
    }

    /**
     * The range used when none is given: [min, max] of the finite values among {@code v[from, to)}; for a constant
     * {@code c} the range {@code [c - h, c + h]} with {@code h = max(|c| / 1024, 2^-126)}; with no finite values
     * {@code [0, 1]} (every bin then counts zero).
     */
    static double[] range(float[] v, int from, int to) {
        double lo = Double.POSITIVE_INFINITY;
        double hi = Double.NEGATIVE_INFINITY;
        for (int i = from; i < to; i++) {
            float x = v[i];
            if (Float.isFinite(x)) {
                if (x < lo) {
                    lo = x;
                }
                if (x > hi) {
                    hi = x;
                }
            }
        }
        return widen(lo, hi);
    }

    /** Widens a degenerate or empty range as {@link #range(float[], int, int)} documents. */
    static double[] widen(double lo, double hi) {
        if (lo > hi) {
            return new double[] {0, 1};
        }
        if (lo == hi) {
            double h = Math.max(Math.abs(lo) / 1024, Float.MIN_NORMAL);
            return new double[] {lo - h, hi + h};
        }
        return new double[] {lo, hi};
    }

    /** The histogram of {@code v[from, to)}; see {@link #of(Tensor, int, double, double)}. */
    static Histogram of(float[] v, int from, int to, int bins, double lo, double hi) {
        if (bins < 1 || bins > MAX_BINS) {
            throw new IllegalArgumentException("histogram: bins must be in [1, " + MAX_BINS + "], got " + bins);
        }
        if (!(Double.isFinite(lo) && Double.isFinite(hi) && lo < hi)) {
            throw new IllegalArgumentException("histogram: range [" + lo + ", " + hi
                    + "] must be finite with lo < hi");
        }
        double[] edges = new double[bins + 1];
        double width = hi - lo;
        for (int i = 0; i < bins; i++) {
            edges[i] = lo + width * i / bins;
        }
        edges[bins] = hi;
        long[] counts = new long[bins];
        long below = 0;
        long above = 0;
        double perUnit = bins / width;
        for (int i = from; i < to; i++) {
            float f = v[i];
            if (!Float.isFinite(f)) {
                continue;
            }
            double x = f;
            if (x < lo) {
                below++;
            } else if (x > hi) {
                above++;
            } else {
                int b = (int) ((x - lo) * perUnit);
                if (b >= bins) {
                    b = bins - 1;
                }
                // The formula can land one bin off the stored edges by rounding; the stored edges decide.
                while (b > 0 && x < edges[b]) {
                    b--;
                }
                while (b < bins - 1 && x >= edges[b + 1]) {
                    b++;
                }
                counts[b]++;
            }
        }
        return new Histogram(edges, counts, below, above);
    }

    /** The number of bins. */
    public int bins() {
        return counts.length;
    }

    /** The {@code bins() + 1} bin edges, ascending (a copy). */
    public double[] edges() {
        return edges.clone();
    }

    /** The count in each bin (a copy). */
    public long[] counts() {
        return counts.clone();
    }

    /** The count in bin {@code i}. */
    public long count(int i) {
        return counts[i];
    }

    /** The centre of bin {@code i}: the mean of its two edges. */
    public double center(int i) {
        return 0.5 * (edges[i] + edges[i + 1]);
    }

    /** The lower end of the range (the first edge). */
    public double lo() {
        return edges[0];
    }

    /** The upper end of the range (the last edge). */
    public double hi() {
        return edges[edges.length - 1];
    }

    /** The number of values counted in the bins (finite values inside the range). */
    public long total() {
        long s = 0;
        for (long c : counts) {
            s += c;
        }
        return s;
    }

    /** The number of finite values below the range. */
    public long below() {
        return below;
    }

    /** The number of finite values above the range. */
    public long above() {
        return above;
    }

    /** The largest bin count (0 for an empty histogram). */
    public long maxCount() {
        long m = 0;
        for (long c : counts) {
            m = Math.max(m, c);
        }
        return m;
    }

    /** One row per bin, columns {@code lower}, {@code upper}, {@code count}. */
    public Table toTable() {
        int n = counts.length;
        DoubleColumn lower = DoubleColumn.create("lower", n);
        DoubleColumn upper = DoubleColumn.create("upper", n);
        LongColumn count = LongColumn.create("count", n);
        for (int i = 0; i < n; i++) {
            lower.set(i, edges[i]);
            upper.set(i, edges[i + 1]);
            count.set(i, counts[i]);
        }
        return Table.create("histogram", lower, upper, count);
    }

    @Override
    public boolean equals(Object o) {
        if (this == o) {
            return true;
        }
        if (!(o instanceof Histogram)) {
            return false;
        }
        Histogram h = (Histogram) o;
        return below == h.below && above == h.above && Arrays.equals(edges, h.edges)
                && Arrays.equals(counts, h.counts);
    }

    @Override
    public int hashCode() {
        return 31 * Arrays.hashCode(edges) + Arrays.hashCode(counts);
    }

    /** For example {@code Histogram 64 bins [-3.912, 4.107] total 10000}. */
    @Override
    public String toString() {
        return String.format(Locale.ROOT, "Histogram %d bins [%.4g, %.4g] total %d%s", bins(), lo(), hi(), total(),
                below + above == 0 ? "" : " (" + below + " below, " + above + " above)");
    }
}
