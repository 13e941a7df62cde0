package dev.rungbook.plan;

import dev.rungbook.chart.Charts;
import dev.rungbook.progress.Progress;
import java.util.ArrayList;
import java.util.List;
import java.util.Locale;
import java.util.Objects;
import java.util.regex.Matcher;
import java.util.regex.Pattern;
import org.knowm.xchart.XYChart;
import org.knowm.xchart.XYSeries;
import org.knowm.xchart.style.markers.SeriesMarkers;
import tech.tablesaw.api.DoubleColumn;
import tech.tablesaw.api.LongColumn;
import tech.tablesaw.api.StringColumn;
import tech.tablesaw.api.Table;

/**
 * Chooses one candidate per layer so that the summed sensitivity is smallest while the quantized weights fit a byte
 * budget:
 *
 * <pre>{@code
 * BitBudget b = BitBudget.of(sensitivity);                 // objective: KL divergence
 * Allocation a = b.solve(BitBudget.parseBytes("40KiB"));    // plan, size, predicted and measured accuracy
 * b.paretoChart(a);                                         // size vs accuracy, uniform baselines marked
 * }</pre>
 *
 * <p>The budget counts what {@code Quantized.bytes()} counts for each layer's weight: bit-packed codes plus scales and
 * zero points. Biases and layers without weights stay float and are not counted.
 *
 * <p>Solving is exact: a dynamic programme over layers keeps every partial plan that no other beats in both bytes
 * and cost, with exact byte sums, so its final states are the whole Pareto frontier of size versus predicted cost and
 * the answer for any budget is read off it. Only when a layer would leave more than {@link #stateLimit(int)} states
 * (default {@value #DEFAULT_STATE_LIMIT}) are they thinned into equal byte buckets; plans still fit their budget, and
 * {@link #exact()} turns false. The prediction assumes the layers' errors add up (first order, common practice);
 * every {@link Allocation} also reports the measured error of the whole plan.
 *
 * <p>Immutable; the frontier is computed on first use and kept.
 */
public final class BitBudget {
    /** The default largest number of partial plans kept per layer. */
    public static final int DEFAULT_STATE_LIMIT = 100_000;
    /** The default largest number of frontier points {@link #paretoChart} measures. */
    public static final int DEFAULT_CHART_POINTS = 40;

    private final SensitivityResult sensitivity;
    private final Objective objective;
    private final int stateLimit;
    private final Progress progress;
    private final int rerank;
    private volatile ParetoDp dp;

    private BitBudget(SensitivityResult sensitivity, Objective objective, int stateLimit, Progress progress,
            int rerank) {
        this.sensitivity = sensitivity;
        this.objective = objective;
        this.stateLimit = stateLimit;
        this.progress = progress;
        this.rerank = rerank;
    }

    /** Allocation over a measured sensitivity, minimising the summed KL divergence. */
    public static BitBudget of(SensitivityResult sensitivity) {
        return new BitBudget(Objects.requireNonNull(sensitivity, "sensitivity"), Objective.KL_DIVERGENCE,
                DEFAULT_STATE_LIMIT, Progress.silent(), 0);
    }

    /**
     * The same allocation minimising {@code o} summed over layers.
     *
     * @throws IllegalArgumentException for {@link Objective#ACCURACY_DROP} when the sensitivity had no labels
     */
    public BitBudget objective(Objective o) {
        Objects.requireNonNull(o, "objective");
        if (o == Objective.ACCURACY_DROP && !sensitivity.hasLabels()) {
            throw new IllegalArgumentException("the accuracy-drop objective needs labelled data; the sensitivity was "
                    + "measured without labels");
        }
        return new BitBudget(sensitivity, o, stateLimit, progress, rerank);
    }

    /** The same allocation keeping at most {@code limit} partial plans per layer (see the class description). */
    public BitBudget stateLimit(int limit) {
        if (limit < 1) {
            throw new IllegalArgumentException("state limit " + limit + " must be positive");
        }
        return new BitBudget(sensitivity, objective, limit, progress, rerank);
    }

    /** The same allocation reporting to {@code listener} (tasks {@code "frontier"} and {@code "measure plans"}). */
    public BitBudget progress(Progress listener) {
        return new BitBudget(sensitivity, objective, stateLimit, Objects.requireNonNull(listener, "listener"),
                rerank);
    }

    /**
     * The same allocation, but {@link #solve} measures the {@code n} frontier plans with the most bytes that fit the
     * budget (the most promising by prediction) together with the uniform baselines that fit, and returns the one
     * that measures best: highest accuracy with labels (ties: lower measured objective, then fewer bytes), else lowest
     * measured objective. This guards against the additive prediction's mistakes at the price of {@code n} more
     * forward passes, and selects on the same data it reports on (check the result on held-out data).
     * {@code 0} (the default) returns the predicted optimum (measured, but not chosen by measurement).
     *
     * @throws IllegalArgumentException if {@code n} is negative
     */
    public BitBudget rerank(int n) {
        if (n < 0) {
            throw new IllegalArgumentException("rerank " + n + " must not be negative");
        }
        return new BitBudget(sensitivity, objective, stateLimit, progress, n);
    }

    /** The objective minimised. */
    public Objective objective() {
        return objective;
    }

    /** The sensitivity this allocation works on. */
    public SensitivityResult sensitivity() {
        return sensitivity;
    }

    private ParetoDp dp() {
        ParetoDp d = dp;
        if (d == null) {
            int layers = sensitivity.layers().size();
            int k = sensitivity.candidates().size();
            long[][] bytes = new long[layers][k];
            double[][] cost = new double[layers][k];
            for (int i = 0; i < layers; i++) {
                for (int j = 0; j < k; j++) {
                    bytes[i][j] = sensitivity.applicable(i, j) ? sensitivity.bytes(i, j) : -1;
                    cost[i][j] = sensitivity.applicable(i, j) ? sensitivity.value(objective, i, j) : Double.NaN;
                }
            }
            d = ParetoDp.solve(bytes, cost, stateLimit, progress);
            dp = d;
        }
        return d;
    }

    /** Whether the frontier is exact (no layer was thinned), so that {@link #solve} is optimal. */
    public boolean exact() {
        return dp().exact();
    }

    /** The bytes of the smallest plan (every layer at its smallest candidate). */
    public long minimumBytes() {
        return dp().points().get(0).bytes();
    }

    /** The bytes of the frontier's most accurate plan (in predicted cost). */
    public long maximumBytes() {
        List<ParetoDp.Point> p = dp().points();
        return p.get(p.size() - 1).bytes();
    }

    /** The number of frontier points. */
    public int frontierSize() {
        return dp().points().size();
    }

    /**
     * The Pareto frontier of bytes versus predicted cost: one row per plan that no other plan beats in both, by
     * increasing bytes: {@code bytes}, the predicted objective and one column per layer with its candidate label.
     */
    public Table frontierTable() {
        LongColumn bytes = LongColumn.create("bytes");
        DoubleColumn cost = DoubleColumn.create("predicted_" + objective.column());
        List<StringColumn> per = new ArrayList<>();
        for (String l : sensitivity.layers()) {
            per.add(StringColumn.create(l));
        }
        for (ParetoDp.Point p : dp().points()) {
            bytes.append(p.bytes());
            cost.append(p.cost());
            int[] c = p.choices();
            for (int i = 0; i < c.length; i++) {
                per.get(i).append(sensitivity.candidates().get(c[i]).label());
            }
        }
        Table t = Table.create("frontier", bytes, cost);
        per.forEach(t::addColumns);
        return t;
    }

    /**
     * The plan with the smallest predicted cost whose quantized weights take at most {@code budgetBytes}, measured on
     * the sensitivity's data; with {@link #rerank(int)}, the best-measuring of the most promising plans that fit.
     *
     * @throws IllegalArgumentException if even the smallest plan does not fit (the message gives its size)
     */
    public Allocation solve(long budgetBytes) {
        ParetoDp.Point p = dp().best(budgetBytes);
        if (p == null) {
            throw new IllegalArgumentException(String.format(Locale.ROOT, "budget %,d bytes is below the smallest "
                    + "plan, %,d bytes (every layer at its smallest candidate)", budgetBytes, minimumBytes()));
        }
        Allocation best = allocation(p.choices(), budgetBytes);
        if (rerank == 0) {
            return best;
        }
        List<ParetoDp.Point> front = dp().points();
        int last = front.indexOf(p);
        for (int i = last - 1; i >= 0 && i > last - rerank; i--) {
            Progress.checkInterrupted("rerank");
            best = better(best, allocation(front.get(i).choices(), budgetBytes));
        }
        for (int k = 0; k < sensitivity.candidates().size(); k++) {
            if (fitsAll(k)) {
                Allocation u = allocation(uniformChoices(k), budgetBytes);
                if (u.bytes() <= budgetBytes) {
                    best = better(best, u);
                }
            }
        }
        return best;
    }

    private Allocation better(Allocation a, Allocation b) {
        if (sensitivity.hasLabels() && a.measuredAccuracy() != b.measuredAccuracy()) {
            return b.measuredAccuracy() > a.measuredAccuracy() ? b : a;
        }
        if (a.measured() != b.measured()) {
            return b.measured() < a.measured() ? b : a;
        }
        return b.bytes() < a.bytes() ? b : a;
    }

    private int[] uniformChoices(int k) {
        int[] c = new int[sensitivity.layers().size()];
        java.util.Arrays.fill(c, k);
        return c;
    }

    /**
     * Every layer at candidate {@code label}, measured.
     *
     * @throws IllegalArgumentException if there is no such candidate or it does not fit some layer
     */
    public Allocation uniform(String label) {
        int k = candidateIndex(label);
        for (int i = 0; i < sensitivity.layers().size(); i++) {
            if (!sensitivity.applicable(i, k)) {
                throw new IllegalArgumentException("candidate '" + label + "' does not fit layer '"
                        + sensitivity.layers().get(i) + "'");
            }
        }
        return allocation(uniformChoices(k), -1);
    }

    /** The uniform plans of every candidate that fits all layers, in candidate order, measured. */
    public List<Allocation> uniformBaselines() {
        List<Allocation> out = new ArrayList<>();
        for (Candidate cand : sensitivity.candidates()) {
            if (fitsAll(candidateIndex(cand.label()))) {
                out.add(uniform(cand.label()));
            }
        }
        return out;
    }

    private boolean fitsAll(int k) {
        for (int i = 0; i < sensitivity.layers().size(); i++) {
            if (!sensitivity.applicable(i, k)) {
                return false;
            }
        }
        return true;
    }

    private int candidateIndex(String label) {
        List<Candidate> cands = sensitivity.candidates();
        for (int k = 0; k < cands.size(); k++) {
            if (cands.get(k).label().equals(label)) {
                return k;
            }
        }
        List<String> labels = new ArrayList<>();
        cands.forEach(c -> labels.add(c.label()));
        throw new IllegalArgumentException("no candidate '" + label + "'; candidates are " + labels);
    }

    private Allocation allocation(int[] choices, long budget) {
        List<String> layers = sensitivity.layers();
        Plan plan = Plan.of(java.util.Map.of());
        List<String> labels = new ArrayList<>();
        long[] bytes = new long[layers.size()];
        double[] cost = new double[layers.size()];
        double dropSum = 0;
        for (int i = 0; i < layers.size(); i++) {
            Candidate c = sensitivity.candidates().get(choices[i]);
            plan = plan.with(layers.get(i), c.spec());
            labels.add(c.label());
            bytes[i] = sensitivity.bytes(i, choices[i]);
            cost[i] = sensitivity.value(objective, i, choices[i]);
            if (sensitivity.hasLabels()) {
                dropSum += sensitivity.value(Objective.ACCURACY_DROP, i, choices[i]);
            }
        }
        long total = 0;
        for (long b : bytes) {
            total += b;
        }
        if (budget >= 0) {
            plan = plan.withInfo("budget_bytes", Long.toString(budget));
        }
        plan = plan.withInfo("bytes", Long.toString(total)).withInfo("objective", objective.column());
        Outputs.Error measured = sensitivity.measure(choices, plan);
        double floatAcc = sensitivity.floatAccuracy();
        return new Allocation(plan, layers, labels, bytes, cost, budget, objective,
                sensitivity.hasLabels() ? floatAcc - dropSum : Double.NaN, floatAcc, measured);
    }

    /** The Pareto chart without a chosen plan marked; see {@link #paretoChart(Allocation)}. */
    public XYChart paretoChart() {
        return paretoChart(null);
    }

    /**
     * Size (KiB of quantized weights) versus measured accuracy, or measured top-1 agreement with the float network
     * when the data had no labels: up to {@value #DEFAULT_CHART_POINTS} plans of the frontier spread evenly along it
     * (each measured), their Pareto frontier as a line, the uniform-precision baselines as labelled diamonds and
     * {@code chosen} (when not null) as a cross.
     */
    public XYChart paretoChart(Allocation chosen) {
        List<ParetoDp.Point> front = dp().points();
        int n = Math.min(DEFAULT_CHART_POINTS, front.size());
        double[] x = new double[n];
        double[] y = new double[n];
        for (int i = 0; i < n; i++) {
            Progress.checkInterrupted("measure plans");
            int at = n == 1 ? front.size() - 1 : (int) Math.round(i * (front.size() - 1) / (double) (n - 1));
            Allocation a = allocation(front.get(at).choices(), -1);
            x[i] = a.bytes() / 1024.0;
            y[i] = metric(a);
            progress.update("measure plans", i + 1, n, Double.NaN);
        }
        progress.finish("measure plans");
        List<Allocation> base = uniformBaselines();
        double[] bx = new double[base.size()];
        double[] by = new double[base.size()];
        List<String> names = new ArrayList<>();
        for (int i = 0; i < base.size(); i++) {
            bx[i] = base.get(i).bytes() / 1024.0;
            by[i] = metric(base.get(i));
            names.add("all " + base.get(i).candidates().get(0));
        }
        String yAxis = sensitivity.hasLabels() ? "measured accuracy" : "top-1 agreement with float";
        XYChart c = Charts.pareto("Mixed precision: size versus " + (sensitivity.hasLabels() ? "accuracy"
                : "agreement"), "quantized weights (KiB)", yAxis, x, y, bx, by, names);
        if (chosen != null) {
            XYSeries s = c.addSeries("chosen plan", new double[] {chosen.bytes() / 1024.0},
                    new double[] {metric(chosen)});
            s.setXYSeriesRenderStyle(org.knowm.xchart.XYSeries.XYSeriesRenderStyle.Scatter);
            s.setMarker(SeriesMarkers.CROSS);
        }
        return c;
    }

    private double metric(Allocation a) {
        return sensitivity.hasLabels() ? a.measuredAccuracy() : a.measuredAgreement();
    }

    private static final Pattern SIZE = Pattern.compile("\\s*([0-9]+(?:\\.[0-9]+)?)\\s*([A-Za-z]*)\\s*");

    /**
     * Bytes from a size such as {@code 36000}, {@code 512B}, {@code 40KiB}, {@code 3.5MiB}, {@code 1.2GB}: binary
     * units KiB, MiB, GiB (powers of 1024), decimal kB/KB, MB, GB (powers of 1000), unit names case-insensitive;
     * fractions are rounded down to whole bytes.
     *
     * @throws IllegalArgumentException naming the text when it is not such a size
     */
    public static long parseBytes(String text) {
        Matcher m = SIZE.matcher(text == null ? "" : text);
        if (!m.matches()) {
            throw new IllegalArgumentException("size '" + text + "' is not a number with an optional unit "
                    + "(B, KiB, MiB, GiB, kB, MB, GB), e.g. 3.5MiB");
        }
        double factor;
        switch (m.group(2).toLowerCase(Locale.ROOT)) {
            case "":
            case "b":
                factor = 1;
                break;
            case "kib":
                factor = 1L << 10;
                break;
            case "mib":
                factor = 1L << 20;
                break;
            case "gib":
                factor = 1L << 30;
                break;
            case "kb":
                factor = 1e3;
                break;
            case "mb":
                factor = 1e6;
                break;
            case "gb":
                factor = 1e9;
                break;
            default:
                throw new IllegalArgumentException("size '" + text + "': unknown unit '" + m.group(2)
                        + "'; use B, KiB, MiB, GiB, kB, MB or GB");
        }
        double v = Double.parseDouble(m.group(1)) * factor;
        if (v >= Long.MAX_VALUE) {
            throw new IllegalArgumentException("size '" + text + "' is too large");
        }
        return (long) Math.floor(v);
    }

    @Override
    public String toString() {
        return String.format(Locale.ROOT, "BitBudget over %d layers x %d candidates, objective %s",
                sensitivity.layers().size(), sensitivity.candidates().size(), objective.column());
    }
}
