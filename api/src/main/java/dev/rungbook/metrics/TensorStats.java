package dev.rungbook.metrics;

import dev.rungbook.internal.TensorAccess;
import dev.rungbook.tensor.DType;
import dev.rungbook.tensor.Tensor;
import dev.rungbook.tensor.TensorView;
import java.util.Arrays;
import java.util.Collections;
import java.util.List;
import java.util.Locale;
import tech.tablesaw.api.DoubleColumn;
import tech.tablesaw.api.IntColumn;
import tech.tablesaw.api.StringColumn;
import tech.tablesaw.api.Table;

/**
 * Descriptive statistics of a tensor, or of one channel or group of it: an immutable value.
 *
 * <h2>Definitions</h2>
 * Let {@code x_1 .. x_n} be the <em>finite</em> values ({@link #count()} {@code = n}); NaN and infinite values are
 * left out of every statistic below and reported separately as {@link #nanCount()} and {@link #infCount()}.
 * <ul>
 *   <li>{@link #min()}, {@link #max()}, {@link #absMax()}: over the finite values.
 *   <li>{@link #mean()}: {@code m = sum(x_i) / n}.
 *   <li>{@link #variance()}: the <em>sample</em> variance {@code sum((x_i - m)^2) / (n - 1)}, as commons-math3's
 *       {@code DescriptiveStatistics} reports it; {@link #std()} is its square root.
 *   <li>{@link #kurtosis()}: the bias-corrected sample <em>excess</em> kurtosis, as commons-math3's {@code Kurtosis}
 *       defines it: {@code n(n+1) / ((n-1)(n-2)(n-3)) * sum((x_i - m)^4) / s^4 - 3(n-1)^2 / ((n-2)(n-3))} with
 *       {@code s = std()}; 0 for a normal distribution, positive for heavy tails.
 *   <li>{@link #beyondSd(double)}: the share of the finite values with {@code |x_i - m| > k s}.
 * </ul>
 *
 * <h2>Undefined values are NaN, never a made-up number</h2>
 * With no finite values (an empty or all-NaN tensor) every statistic except the counts is NaN. With {@code n = 1}
 * the standard deviation, kurtosis and shares beyond k standard deviations are NaN (commons-math3 reports a standard
 * deviation of 0 there; a sample of one says nothing about spread). Kurtosis is NaN for {@code n < 4} and when all
 * finite values are equal (zero variance), as commons-math3 gives.
 *
 * <h2>Numerics</h2>
 * One pass finds the counts, min, max and a compensated (Kahan) sum in double; a second pass accumulates the powers
 * of the deviations from that mean in double and corrects the mean and the central moments for the first mean's
 * rounding error (the corrected two-pass scheme), so large offsets and large n do not lose the variance.
 *
 * <p>A {@code TensorStats} keeps a reference to the (immutable) tensor it measured, so {@link #histogram(int)} and
 * {@link #beyondSd(double)} can read the values again on request.
 */
public final class TensorStats {
    /** The default number of histogram bins, used by {@link #histogram()}. */
    public static final int DEFAULT_BINS = 64;
    /** The default k of {@link #beyondSd()}. */
    public static final double DEFAULT_K = 3;

    private final Tensor tensor;
    private final TensorView view;
    private final int size;
    private final int count;
    private final int nanCount;
    private final int infCount;
    private final double min;
    private final double max;
    private final double mean;
    private final double variance;
    private final double kurtosis;
    private final double beyond3;

    private TensorStats(Tensor tensor, TensorView view, float[] v, int n) {
        this.tensor = tensor;
        this.view = view;
        this.size = n;
        int cnt = 0;
        int nan = 0;
        int inf = 0;
        double lo = Double.POSITIVE_INFINITY;
        double hi = Double.NEGATIVE_INFINITY;
        double sum = 0;
        double comp = 0;
        for (int i = 0; i < n; i++) {
            float f = v[i];
            if (Float.isFinite(f)) {
                cnt++;
                if (f < lo) {
                    lo = f;
                }
                if (f > hi) {
                    hi = f;
                }
                double y = f - comp;
                double t = sum + y;
                comp = (t - sum) - y;
                sum = t;
            } else if (Float.isNaN(f)) {
                nan++;
            } else {
                inf++;
            }
        }
        this.count = cnt;
        this.nanCount = nan;
        this.infCount = inf;
        if (cnt == 0) {
            this.min = Double.NaN;
            this.max = Double.NaN;
            this.mean = Double.NaN;
            this.variance = Double.NaN;
            this.kurtosis = Double.NaN;
            this.beyond3 = Double.NaN;
            return;
        }
        this.min = lo;
        this.max = hi;
        double m0 = sum / cnt;
        double s1 = 0;
        double s2 = 0;
        double s3 = 0;
        double s4 = 0;
        for (int i = 0; i < n; i++) {
            float f = v[i];
            if (Float.isFinite(f)) {
                double d = f - m0;
                double d2 = d * d;
                s1 += d;
                s2 += d2;
                s3 += d2 * d;
                s4 += d2 * d2;
            }
        }
        // Shift the moments from m0 to the corrected mean m = m0 + c: sum (d - c)^k expanded binomially.
        double c = s1 / cnt;
        this.mean = m0 + c;
        double m2 = Math.max(0, s2 - c * s1);
        double m4 = s4 - 4 * c * s3 + 6 * c * c * s2 - 3 * c * c * c * s1;
        m4 = Math.max(0, m4);
        if (cnt < 2) {
            this.variance = Double.NaN;
            this.kurtosis = Double.NaN;
            this.beyond3 = Double.NaN;
            return;
        }
        double var = m2 / (cnt - 1);
        this.variance = var;
        if (cnt < 4 || var == 0) {
            this.kurtosis = Double.NaN;
        } else {
            double nn = cnt;
            double coef = nn * (nn + 1) / ((nn - 1) * (nn - 2) * (nn - 3));
            double term = 3 * (nn - 1) * (nn - 1) / ((nn - 2) * (nn - 3));
            this.kurtosis = coef * (m4 / (var * var)) - term;
        }
        this.beyond3 = beyond(v, n, DEFAULT_K);
    }

    private double beyond(float[] v, int n, double k) {
        if (count < 2) {
            return Double.NaN;
        }
        double limit = k * Math.sqrt(variance);
        int out = 0;
        for (int i = 0; i < n; i++) {
            float f = v[i];
            if (Float.isFinite(f) && Math.abs(f - mean) > limit) {
                out++;
            }
        }
        return (double) out / count;
    }

    /** The statistics of all values of {@code t} (loads a lazy tensor). */
    public static TensorStats of(Tensor t) {
        float[] v = TensorAccess.data(t);
        return new TensorStats(t, null, v, v.length);
    }

    /** The statistics of the values in a view (a channel or group) of a tensor. */
    public static TensorStats of(TensorView view) {
        float[] v = view.toFloatArray();
        return new TensorStats(view.tensor(), view, v, v.length);
    }

    /**
     * The statistics of each channel of {@code axis} (for a weight shaped out x in, axis 0 gives one entry per output
     * row), in channel order.
     *
     * @throws IllegalArgumentException if {@code axis} is out of range for the tensor's shape
     */
    public static List<TensorStats> perChannel(Tensor t, int axis) {
        List<TensorView> channels = t.channels(axis);
        int n = channels.size();
        TensorStats[] out = new TensorStats[n];
        float[] scratch = new float[n == 0 ? 0 : channels.get(0).size()];
        for (int i = 0; i < n; i++) {
            TensorView ch = channels.get(i);
            ch.copyTo(scratch, 0);
            out[i] = new TensorStats(t, ch, scratch, scratch.length);
        }
        return List.copyOf(Arrays.asList(out));
    }

    /**
     * The statistics of each channel of {@code axis} as a table with one row per channel and the columns
     * {@code tensor, channel, count, min, max, mean, std, absmax, kurtosis, beyond3sd, nan, inf} (see
     * {@link #toTable()} for their meaning). Undefined statistics are missing values (NaN) in the table.
     *
     * @throws IllegalArgumentException if {@code axis} is out of range for the tensor's shape
     */
    public static Table perChannelTable(Tensor t, int axis) {
        List<TensorStats> all = perChannel(t, axis);
        Table table = Table.create("stats of " + t.label() + " per channel of axis " + axis);
        table.addColumns(StringColumn.create("tensor", Collections.nCopies(all.size(), displayName(t))));
        IntColumn channel = IntColumn.create("channel", all.size());
        for (int i = 0; i < all.size(); i++) {
            channel.set(i, i);
        }
        table.addColumns(channel);
        addStatColumns(table, all);
        return table;
    }

    private static void addStatColumns(Table table, List<TensorStats> rows) {
        int n = rows.size();
        IntColumn count = IntColumn.create("count", n);
        DoubleColumn min = DoubleColumn.create("min", n);
        DoubleColumn max = DoubleColumn.create("max", n);
        DoubleColumn mean = DoubleColumn.create("mean", n);
        DoubleColumn std = DoubleColumn.create("std", n);
        DoubleColumn absmax = DoubleColumn.create("absmax", n);
        DoubleColumn kurt = DoubleColumn.create("kurtosis", n);
        DoubleColumn beyond = DoubleColumn.create("beyond3sd", n);
        IntColumn nan = IntColumn.create("nan", n);
        IntColumn inf = IntColumn.create("inf", n);
        for (int i = 0; i < n; i++) {
            TensorStats s = rows.get(i);
            count.set(i, s.count);
            min.set(i, s.min);
            max.set(i, s.max);
            mean.set(i, s.mean);
            std.set(i, s.std());
            absmax.set(i, s.absMax());
            kurt.set(i, s.kurtosis);
            beyond.set(i, s.beyond3);
            nan.set(i, s.nanCount);
            inf.set(i, s.infCount);
        }
        table.addColumns(count, min, max, mean, std, absmax, kurt, beyond, nan, inf);
    }

    private static String displayName(Tensor t) {
        return t.name() == null ? "(unnamed)" : t.name();
    }

    private float[] values() {
        return view == null ? TensorAccess.data(tensor) : view.toFloatArray();
    }

    /** The tensor's name, or {@code null} when it has none. */
    public String name() {
        return tensor.name();
    }

    /** What was measured, for example {@code tensor 'fc1.weight'} or {@code channel 3 of axis 0 of tensor 'fc1.weight'}. */
    public String label() {
        return view == null ? tensor.label() : view.toString();
    }

    /** The dtype the tensor came from. */
    public DType dtype() {
        return tensor.dtype();
    }

    /** The shape of the whole tensor (a copy), also for the statistics of a channel. */
    public int[] shape() {
        return tensor.shape();
    }

    /** The channel or group number for the statistics of a view, or -1 for a whole tensor. */
    public int index() {
        return view == null ? -1 : view.index();
    }

    /** The number of elements examined: {@code count() + nanCount() + infCount()}. */
    public int size() {
        return size;
    }

    /** The number of finite values, the n of every statistic. */
    public int count() {
        return count;
    }

    /** The number of NaN values. */
    public int nanCount() {
        return nanCount;
    }

    /** The number of infinite values (either sign). */
    public int infCount() {
        return infCount;
    }

    /** The smallest finite value (NaN when there is none). */
    public double min() {
        return min;
    }

    /** The largest finite value (NaN when there is none). */
    public double max() {
        return max;
    }

    /** The largest magnitude among the finite values: {@code max(|min|, |max|)} (NaN when there is none). */
    public double absMax() {
        return Math.max(Math.abs(min), Math.abs(max));
    }

    /** The mean of the finite values (NaN when there is none). */
    public double mean() {
        return mean;
    }

    /** The sample variance (divisor n - 1) of the finite values; NaN when n &lt; 2. */
    public double variance() {
        return variance;
    }

    /** The sample standard deviation (divisor n - 1) of the finite values; NaN when n &lt; 2. */
    public double std() {
        return Math.sqrt(variance);
    }

    /** The bias-corrected sample excess kurtosis (see the class notes); NaN when n &lt; 4 or the variance is 0. */
    public double kurtosis() {
        return kurtosis;
    }

    /** The share of finite values more than 3 sample standard deviations from the mean; NaN when n &lt; 2. */
    public double beyondSd() {
        return beyond3;
    }

    /**
     * The share (0..1) of finite values more than {@code k} sample standard deviations from the mean, that is with
     * {@code |x - mean| > k * std}; NaN when n &lt; 2. Reads the values again (one pass).
     *
     * @throws IllegalArgumentException if {@code k} is negative or not finite
     */
    public double beyondSd(double k) {
        if (!(k >= 0 && Double.isFinite(k))) {
            throw new IllegalArgumentException(label() + ": k must be finite and >= 0, got " + k);
        }
        if (k == DEFAULT_K) {
            return beyond3;
        }
        float[] v = values();
        return beyond(v, v.length, k);
    }

    /** The histogram of the finite values in {@value #DEFAULT_BINS} equal bins over [min, max]. */
    public Histogram histogram() {
        return histogram(DEFAULT_BINS);
    }

    /**
     * The histogram of the finite values in {@code bins} equal bins over [min, max] (for a constant tensor a small
     * range centred on its value, see {@link Histogram}). Reads the values again (one pass).
     *
     * @throws IllegalArgumentException if {@code bins} is not in [1, {@link Histogram#MAX_BINS}]
     */
    public Histogram histogram(int bins) {
        float[] v = values();
        double[] r = count == 0 ? Histogram.widen(1, 0) : Histogram.widen(min, max);
        return Histogram.of(v, 0, v.length, bins, r[0], r[1]);
    }

    /**
     * A bin count by the Freedman-Diaconis rule, for {@link #histogram(int)}: {@code ceil((max - min) / w)} with bin
     * width {@code w = 2 IQR n^(-1/3)}, where IQR is the 75th minus the 25th percentile of the finite values (linear
     * interpolation between order statistics, NumPy's default and Hyndman-Fan type 7), clamped to [1, maxBins].
     * When IQR is 0 but the values are not all equal (for example mostly-zero weights) the rule gives no finite
     * width and the answer is {@code maxBins}; with fewer than 2 finite values or all equal it is 1. Sorts a copy of
     * the finite values.
     *
     * @throws IllegalArgumentException if {@code maxBins} is not in [1, {@link Histogram#MAX_BINS}]
     */
    public int freedmanDiaconisBins(int maxBins) {
        if (maxBins < 1 || maxBins > Histogram.MAX_BINS) {
            throw new IllegalArgumentException(label() + ": maxBins must be in [1, " + Histogram.MAX_BINS + "], got "
                    + maxBins);
        }
        if (count < 2 || min == max) {
            return 1;
        }
        float[] v = values();
        float[] finite = new float[count];
        int k = 0;
        for (float f : v) {
            if (Float.isFinite(f)) {
                finite[k++] = f;
            }
        }
        Arrays.sort(finite);
        double iqr = quantile7(finite, 0.75) - quantile7(finite, 0.25);
        if (iqr <= 0) {
            return maxBins;
        }
        double width = 2 * iqr / Math.cbrt(count);
        double bins = Math.ceil((max - min) / width);
        return (int) Math.max(1, Math.min(maxBins, bins));
    }

    /** The p-quantile of sorted values by linear interpolation at position p (n - 1) (Hyndman-Fan type 7). */
    static double quantile7(float[] sorted, double p) {
        double pos = p * (sorted.length - 1);
        int lo = (int) Math.floor(pos);
        int hi = Math.min(lo + 1, sorted.length - 1);
        double frac = pos - lo;
        return sorted[lo] + frac * ((double) sorted[hi] - sorted[lo]);
    }

    /**
     * One row with the columns {@code tensor} (name, or {@code (unnamed)}), {@code dtype}, {@code shape} (as
     * {@code [256, 64]}), {@code count} (finite values), {@code min}, {@code max}, {@code mean}, {@code std} (sample),
     * {@code absmax}, {@code kurtosis} (excess), {@code beyond3sd} (share 0..1), {@code nan}, {@code inf}.
     * Undefined statistics are missing values (NaN). The table is named after {@link #label()}.
     */
    public Table toTable() {
        Table table = Table.create("stats of " + label());
        table.addColumns(StringColumn.create("tensor", List.of(displayName(tensor))),
                StringColumn.create("dtype", List.of(dtype().safetensorsName())),
                StringColumn.create("shape", List.of(view == null ? Arrays.toString(shape())
                        : Arrays.toString(shape()) + " " + view.toString().replace(" of " + tensor.label(), ""))));
        addStatColumns(table, List.of(this));
        return table;
    }

    /**
     * A compact one-line summary, for example
     * {@code tensor 'fc1.weight' [256, 64] F32: n=16384 min=-0.4213 max=0.3981 mean=0.0001 std=0.0625 absmax=0.4213
     * kurtosis=0.12 beyond3sd=0.27% nan=0 inf=0}.
     */
    @Override
    public String toString() {
        return String.format(Locale.ROOT,
                "%s %s %s: n=%d min=%.4g max=%.4g mean=%.4g std=%.4g absmax=%.4g kurtosis=%.3g beyond3sd=%.3g%% "
                        + "nan=%d inf=%d",
                label(), Arrays.toString(shape()), dtype(), count, min, max, mean, std(), absMax(), kurtosis,
                100 * beyond3, nanCount, infCount);
    }
}
