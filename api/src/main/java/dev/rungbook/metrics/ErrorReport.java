package dev.rungbook.metrics;

import dev.rungbook.internal.Lanes;
import dev.rungbook.internal.TensorAccess;
import dev.rungbook.tensor.Tensor;
import dev.rungbook.tensor.TensorView;
import java.util.Arrays;
import java.util.List;
import java.util.Locale;
import java.util.Objects;
import tech.tablesaw.api.DoubleColumn;
import tech.tablesaw.api.IntColumn;
import tech.tablesaw.api.StringColumn;
import tech.tablesaw.api.Table;

/**
 * How far an approximation (typically a dequantized tensor) is from a reference tensor of the same shape. Sums are
 * accumulated in double, in four interleaved partial sums (the order is fixed, so the figures are the same with and
 * without the Vector API module; see {@code Lanes.pairSums}). With {@code e = approximation - reference}, {@code x = reference}, {@code y = approximation}
 * and {@code n} elements:
 * <ul>
 *   <li>{@link #mse()} = {@code sum(e^2) / n}; {@link #rmse()} its square root; {@link #mae()} = {@code sum|e| / n};
 *       {@link #maxAbsError()} = {@code max|e|} (all 0 for an empty tensor);</li>
 *   <li>{@link #sqnrDb()} = {@code 10 log10(sum(x^2) / sum(e^2))}: {@code +Infinity} when the error is 0 (exact
 *       reconstruction, including a zero signal), {@code -Infinity} when the signal is 0 but the error is not;</li>
 *   <li>{@link #cosine()} = {@code x.y / (|x| |y|)}: 1 when both are zero, 0 when exactly one is;</li>
 *   <li>{@link #frobenius()} = {@code |e|} (Frobenius norm of the error); {@link #relativeFrobenius()} =
 *       {@code |e| / |x|}: 0 when the error is 0, {@code +Infinity} when only the signal is 0;</li>
 *   <li>{@link #klDivergence()}: {@code KL(P || Q)} in nats between histograms of {@code x} (P) and {@code y} (Q),
 *       256 equal bins over {@code [min, max]} of both tensors together; Q is mixed with 10^-6 of the uniform
 *       distribution ({@code Q' = (1 - 1e-6) Q + 1e-6 / bins}) so that the value is finite; exactly 0 when the two
 *       histograms are identical.</li>
 * </ul>
 * No metric is ever NaN. Immutable. The sums behind all metrics but the KL divergence, and the ranges of both
 * tensors, are taken in one pass when the report is made; the two histograms of the KL divergence only when
 * {@link #klDivergence()} (or {@link #values()}, {@link #toTable()}) first asks for it, in one more pass (the bin
 * index needs no clamping, see {@code count}), and then kept. Several approximations of one tensor can share its
 * histogram work through {@link #reference(Tensor)} and {@link #of(Reference, Tensor)}, with the same values.
 */
public final class ErrorReport {
    /** The number of histogram bins of {@link #klDivergence()}. */
    public static final int KL_BINS = 256;
    /** The share of the uniform distribution mixed into Q by {@link #klDivergence()}. */
    public static final double KL_MIX = 1e-6;

    private final Tensor reference;
    private final Tensor approximation;
    private final int channelAxis;
    private final Sums sums;
    /** The reference's shared value counts, or null: then the KL histograms take one pass over both tensors. */
    private final Reference shared;
    /** The KL divergence once computed; NaN (which the divergence never is) until then. */
    private volatile double kl;

    private ErrorReport(Tensor reference, Tensor approximation, int channelAxis, Sums sums, Reference shared,
            double kl) {
        this.reference = reference;
        this.approximation = approximation;
        this.channelAxis = channelAxis;
        this.sums = sums;
        this.shared = shared;
        this.kl = kl;
    }

    /**
     * The error of {@code approximation} against {@code reference}; the per-channel table runs over axis 0.
     *
     * @throws IllegalArgumentException if the shapes differ (both named) or a tensor holds NaN/infinity
     */
    public static ErrorReport of(Tensor reference, Tensor approximation) {
        Objects.requireNonNull(reference, "reference");
        return of(reference, approximation, null);
    }

    /**
     * The error of {@code approximation} against the tensor of {@code reference}: the same report, value for value,
     * as {@link #of(Tensor, Tensor)}, but the KL divergence's histogram of the reference comes from the value counts
     * that {@code reference} holds, so that comparing many approximations of one tensor counts its values once.
     *
     * @throws IllegalArgumentException if the shapes differ (both named) or a tensor holds NaN/infinity
     */
    public static ErrorReport of(Reference reference, Tensor approximation) {
        Objects.requireNonNull(reference, "reference");
        return of(reference.tensor, approximation, reference);
    }

    private static ErrorReport of(Tensor reference, Tensor approximation, Reference shared) {
        Objects.requireNonNull(approximation, "approximation");
        if (!Arrays.equals(reference.shape(), approximation.shape())) {
            throw new IllegalArgumentException("cannot compare " + reference.label() + " of shape "
                    + Arrays.toString(reference.shape()) + " with " + approximation.label() + " of shape "
                    + Arrays.toString(approximation.shape()));
        }
        float[] x = TensorAccess.data(reference);
        float[] y = TensorAccess.data(approximation);
        Sums s = new Sums();
        s.addAll(x, y);
        if (!Double.isFinite(s.ssx) || !Double.isFinite(s.ssy)) {
            checkFinite(reference, x);
            checkFinite(approximation, y);
        }
        return new ErrorReport(reference, approximation, reference.rank() > 0 ? 0 : -1, s, shared, Double.NaN);
    }

    /**
     * A tensor prepared as the reference of several error reports ({@link ErrorReport#of(Reference, Tensor)}):
     * when its values are all bfloat16 numbers (as read from a bf16 checkpoint) it holds how often each of the
     * 65536 bit patterns occurs, counted in one pass, from which the KL histogram over any range follows without
     * another pass over the tensor. Other tensors are counted by each report as {@link ErrorReport#of(Tensor,
     * Tensor)} does. Immutable and safe to share between threads.
     */
    public static final class Reference {
        private final Tensor tensor;
        /** Occurrences of each bfloat16 pattern (index: the top 16 bits of the float), or null. */
        private final int[] bf16Counts;

        private Reference(Tensor tensor, int[] bf16Counts) {
            this.tensor = tensor;
            this.bf16Counts = bf16Counts;
        }

        /** The reference tensor. */
        public Tensor tensor() {
            return tensor;
        }

        /** Whether the values were counted per bfloat16 pattern (otherwise each report counts them itself). */
        public boolean countsValues() {
            return bf16Counts != null;
        }
    }

    /**
     * Prepares {@code reference} for several reports: one pass over its values (stopped after the first 4096 when
     * they are not all bfloat16 numbers).
     */
    public static Reference reference(Tensor reference) {
        Objects.requireNonNull(reference, "reference");
        return new Reference(reference, bf16Counts(TensorAccess.data(reference)));
    }

    /** Counts of each bfloat16 pattern in {@code x}, or null if some value has nonzero low 16 bits. */
    static int[] bf16Counts(float[] x) {
        int n = x.length;
        int probe = Math.min(n, 4096);
        int low = 0;
        for (int i = 0; i < probe; i++) {
            low |= Float.floatToRawIntBits(x[i]);
        }
        if ((low & 0xFFFF) != 0) {
            return null;
        }
        // Two interleaved tables, so that equal neighbouring values do not wait on each other's increments.
        int[] c = new int[2 << 16];
        int i = 0;
        for (; i + 1 < n; i += 2) {
            int a = Float.floatToRawIntBits(x[i]);
            int b = Float.floatToRawIntBits(x[i + 1]);
            low |= a | b;
            c[a >>> 16]++;
            c[(1 << 16) + (b >>> 16)]++;
        }
        if (i < n) {
            int a = Float.floatToRawIntBits(x[i]);
            low |= a;
            c[a >>> 16]++;
        }
        if ((low & 0xFFFF) != 0) {
            return null;
        }
        int[] counts = new int[1 << 16];
        for (int k = 0; k < counts.length; k++) {
            counts[k] = c[k] + c[(1 << 16) + k];
        }
        return counts;
    }

    private static void checkFinite(Tensor t, float[] d) {
        for (int i = 0; i < d.length; i++) {
            if (!Float.isFinite(d[i])) {
                throw new IllegalArgumentException(t.label() + ": value " + d[i] + " at index " + i
                        + "; an error report needs finite values");
            }
        }
    }

    /** The same report with its per-channel table over {@code axis} (-1: one row for the whole tensor). */
    public ErrorReport withChannelAxis(int axis) {
        if (axis < -1 || axis >= reference.rank()) {
            throw new IllegalArgumentException(reference.label() + ": axis " + axis + " is out of range for shape "
                    + Arrays.toString(reference.shape()));
        }
        return new ErrorReport(reference, approximation, axis, sums, shared, kl);
    }

    /** The KL divergence of the value histograms, computed on first use (two racing callers compute the same). */
    private double kl() {
        double k = kl;
        if (Double.isNaN(k)) {
            float[] x = TensorAccess.data(reference);
            float[] y = TensorAccess.data(approximation);
            k = klDivergence(x, y, sums.xmin, sums.xmax, sums.ymin, sums.ymax, shared == null ? null
                    : shared.bf16Counts, KL_BINS);
            kl = k;
        }
        return k;
    }

    /** Running sums over pairs of values. */
    private static final class Sums {
        long n;
        double sse;
        double sae;
        double maxAbs;
        double ssx;
        double ssy;
        double dot;
        /** Smallest and largest values of x and of y (+-Infinity for no values; -0.0 and +0.0 not told apart). */
        float xmin = Float.POSITIVE_INFINITY;
        float xmax = Float.NEGATIVE_INFINITY;
        float ymin = Float.POSITIVE_INFINITY;
        float ymax = Float.NEGATIVE_INFINITY;

        /** One pass over both arrays ({@link Lanes#pairSums}: four-lane sums, vectorised with the module). */
        void addAll(float[] x, float[] y) {
            double[] p = Lanes.pairSums(x, y);
            n += x.length;
            sse += p[0];
            sae += p[1];
            maxAbs = Math.max(maxAbs, p[2]);
            ssx += p[3];
            ssy += p[4];
            dot += p[5];
            xmin = Math.min(xmin, (float) p[6]);
            xmax = Math.max(xmax, (float) p[7]);
            ymin = Math.min(ymin, (float) p[8]);
            ymax = Math.max(ymax, (float) p[9]);
        }

        double mse() {
            return n == 0 ? 0 : sse / n;
        }

        double mae() {
            return n == 0 ? 0 : sae / n;
        }

        double sqnr() {
            if (sse == 0) {
                return Double.POSITIVE_INFINITY;
            }
            if (ssx == 0) {
                return Double.NEGATIVE_INFINITY;
            }
            return 10 * Math.log10(ssx / sse);
        }

        double cosine() {
            if (ssx == 0 && ssy == 0) {
                return 1;
            }
            if (ssx == 0 || ssy == 0) {
                return 0;
            }
            double c = dot / (Math.sqrt(ssx) * Math.sqrt(ssy));
            return Math.max(-1, Math.min(1, c));
        }

        double relFrobenius() {
            if (sse == 0) {
                return 0;
            }
            return ssx == 0 ? Double.POSITIVE_INFINITY : Math.sqrt(sse / ssx);
        }
    }

    /**
     * {@code KL(P || Q)} in nats between {@code bins}-bin histograms of {@code x} and {@code y} over their common
     * range {@code [min, max]}, with Q mixed with {@link #KL_MIX} of the uniform distribution (see the class
     * description). Values must be finite.
     */
    static double klDivergence(float[] x, float[] y, int bins) {
        Sums s = new Sums();
        s.addAll(x, y);
        return klDivergence(x, y, s.xmin, s.xmax, s.ymin, s.ymax, null, bins);
    }

    /**
     * {@link #klDivergence(float[], float[], int)} given the ranges of {@code x} and {@code y} (finite values) and,
     * optionally, the bfloat16 pattern counts of {@code x} ({@link #bf16Counts}), which then stand for {@code x}.
     */
    static double klDivergence(float[] x, float[] y, float xmin, float xmax, float ymin, float ymax, int[] xCounts,
            int bins) {
        if (x.length == 0) {
            return 0;
        }
        double lo = ymin < xmin ? ymin : xmin;
        double hi = ymax > xmax ? ymax : xmax;
        double norm = hi > lo ? bins / (hi - lo) : 0;
        long[] p = xCounts != null ? countPatterns(xCounts, lo, norm, bins) : count(x, lo, norm, bins);
        long[] q = count(y, lo, norm, bins);
        if (Arrays.equals(p, q)) {
            return 0;
        }
        double n = x.length;
        double kl = 0;
        for (int k = 0; k < bins; k++) {
            if (p[k] == 0) {
                continue;
            }
            double pb = p[k] / n;
            double qb = (1 - KL_MIX) * (q[k] / n) + KL_MIX / bins;
            kl += pb * Math.log(pb / qb);
        }
        return Math.max(0, kl);
    }

    /*
     * The bin of a value v in [lo, hi] is floor((v - lo) * norm) with norm = bins / (hi - lo) (0 when hi == lo),
     * the top bin closed. In floating point the index is never negative (v - lo >= 0 for v >= lo; -0.0 gives bin 0)
     * and at most bins: v - lo rounds to at most d = fl(hi - lo), and d * fl(bins / d) is below bins * (1 + 2^-52),
     * which rounds below bins + 1. So the counts go to a table of bins + 1 entries with no clamping, and entry
     * [bins] (values at or just below hi) is added to the top bin at the end: the same counts as clamping each
     * index, without a compare per value.
     */

    /**
     * Counts of {@code v} (every value in [lo, hi]) in {@code bins} bins, in one pass: two interleaved tables (even
     * and odd indices) added at the end, so that runs of equal bins do not wait on each other's increments.
     */
    private static long[] count(float[] v, double lo, double norm, int bins) {
        int stride = bins + 1;
        int[] h = new int[2 * stride];
        int n = v.length;
        int i = 0;
        for (; i + 1 < n; i += 2) {
            h[(int) ((v[i] - lo) * norm)]++;
            h[stride + (int) ((v[i + 1] - lo) * norm)]++;
        }
        if (i < n) {
            h[(int) ((v[i] - lo) * norm)]++;
        }
        long[] c = new long[bins];
        for (int k = 0; k < bins; k++) {
            c[k] = (long) h[k] + h[stride + k];
        }
        c[bins - 1] += (long) h[bins] + h[stride + bins];
        return c;
    }

    /** {@link #count} of the values that {@code patterns} counts per bfloat16 bit pattern. */
    private static long[] countPatterns(int[] patterns, double lo, double norm, int bins) {
        long[] c = new long[bins + 1];
        for (int k = 0; k < patterns.length; k++) {
            int m = patterns[k];
            if (m != 0) {
                float v = Float.intBitsToFloat(k << 16);
                c[(int) ((v - lo) * norm)] += m;
            }
        }
        c[bins - 1] += c[bins];
        return Arrays.copyOf(c, bins);
    }

    /** The reference tensor. */
    public Tensor reference() {
        return reference;
    }

    /** The approximation. */
    public Tensor approximation() {
        return approximation;
    }

    /** The number of elements compared. */
    public long count() {
        return sums.n;
    }

    /** Mean squared error. */
    public double mse() {
        return sums.mse();
    }

    /** Root mean squared error. */
    public double rmse() {
        return Math.sqrt(sums.mse());
    }

    /** Mean absolute error. */
    public double mae() {
        return sums.mae();
    }

    /** Largest absolute error. */
    public double maxAbsError() {
        return sums.maxAbs;
    }

    /** Signal-to-quantization-noise ratio in dB ({@code +Infinity} for an exact reconstruction). */
    public double sqnrDb() {
        return sums.sqnr();
    }

    /** Cosine similarity of reference and approximation. */
    public double cosine() {
        return sums.cosine();
    }

    /** Frobenius (Euclidean) norm of the error. */
    public double frobenius() {
        return Math.sqrt(sums.sse);
    }

    /** Frobenius norm of the error divided by that of the reference. */
    public double relativeFrobenius() {
        return sums.relFrobenius();
    }

    /** KL divergence of the value histograms in nats (see the class description). */
    public double klDivergence() {
        return kl();
    }

    /** The axis of the per-channel table (-1: the whole tensor is one row). */
    public int channelAxis() {
        return channelAxis;
    }

    /** Column names of {@link #perChannel()}: the index column, then the metrics. */
    public static final List<String> CHANNEL_COLUMNS = List.of("channel", "mse", "rmse", "mae", "max_abs_error",
            "sqnr_db", "cosine", "rel_frobenius");

    /** The per-channel breakdown over {@link #channelAxis()}. */
    public Table perChannel() {
        return perChannel(channelAxis);
    }

    /**
     * One row per channel of {@code axis} with columns {@link #CHANNEL_COLUMNS}: {@code channel} (int), then the
     * metrics of that channel alone (double).
     */
    public Table perChannel(int axis) {
        int channels;
        if (axis == -1) {
            channels = 1;
        } else {
            if (axis < 0 || axis >= reference.rank()) {
                throw new IllegalArgumentException(reference.label() + ": axis " + axis
                        + " is out of range for shape " + Arrays.toString(reference.shape()));
            }
            channels = reference.dim(axis);
        }
        IntColumn idx = IntColumn.create("channel");
        DoubleColumn[] cols = new DoubleColumn[CHANNEL_COLUMNS.size() - 1];
        for (int k = 0; k < cols.length; k++) {
            cols[k] = DoubleColumn.create(CHANNEL_COLUMNS.get(k + 1));
        }
        for (int c = 0; c < channels; c++) {
            TensorView a = axis == -1 ? reference.all() : reference.channel(axis, c);
            TensorView b = axis == -1 ? approximation.all() : approximation.channel(axis, c);
            float[] xa = a.toFloatArray();
            float[] ya = b.toFloatArray();
            Sums s = new Sums();
            s.addAll(xa, ya);
            idx.append(c);
            cols[0].append(s.mse());
            cols[1].append(Math.sqrt(s.mse()));
            cols[2].append(s.mae());
            cols[3].append(s.maxAbs);
            cols[4].append(s.sqnr());
            cols[5].append(s.cosine());
            cols[6].append(s.relFrobenius());
        }
        Table t = Table.create("error per channel of axis " + axis + " of " + reference.label(), idx);
        t.addColumns(cols);
        return t;
    }

    /** Metric names of {@link #toTable()}, in order. */
    public static final List<String> METRICS = List.of("mse", "rmse", "mae", "max_abs_error", "sqnr_db", "cosine",
            "frobenius", "rel_frobenius", "kl_divergence");

    /** The metrics in the order of {@link #METRICS}. */
    public double[] values() {
        return new double[] {mse(), rmse(), mae(), maxAbsError(), sqnrDb(), cosine(), frobenius(),
            relativeFrobenius(), klDivergence()};
    }

    /** A two-column table ({@code metric}, {@code value}), one row per entry of {@link #METRICS}. */
    public Table toTable() {
        StringColumn m = StringColumn.create("metric", METRICS);
        DoubleColumn v = DoubleColumn.create("value", values());
        return Table.create("error of " + reference.label(), m, v);
    }

    /** One line, for example {@code ErrorReport tensor 'w': mse 1.2e-05, sqnr 38.41 dB, cosine 0.99993}. */
    @Override
    public String toString() {
        return String.format(Locale.ROOT, "ErrorReport %s: mse %.4g, rmse %.4g, max|e| %.4g, sqnr %.2f dB, cosine %.6f",
                reference.label(), mse(), rmse(), maxAbsError(), sqnrDb(), cosine());
    }
}
