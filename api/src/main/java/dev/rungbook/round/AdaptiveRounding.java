package dev.rungbook.round;

import dev.rungbook.internal.LinearAlgebra;
import dev.rungbook.internal.TensorAccess;
import dev.rungbook.progress.Progress;
import dev.rungbook.tensor.Tensor;
import java.util.ArrayList;
import java.util.Arrays;
import java.util.List;
import java.util.Locale;
import java.util.Objects;
import java.util.SplittableRandom;
import java.util.function.Consumer;

/**
 * Adaptive rounding (AdaRound; Nagel et al., "Up or Down? Adaptive Rounding for Post-Training Quantization",
 * ICML 2020): each weight is rounded up or down as learned from calibration inputs, so that the layer's output
 * error, not each weight's own error, is small.
 *
 * <p>Every weight {@code w} on a grid with scale {@code s} and zero point {@code z} gets a continuous variable
 * {@code V}; the rectified sigmoid {@code h(V) = clip(sigmoid(V) (zeta - gamma) + gamma, 0, 1)} with
 * {@code zeta = 1.1}, {@code gamma = -0.1} chooses between {@code floor(w / s + z)} and one more. {@code V} starts
 * where {@code h(V)} equals the fractional part of {@code w / s + z}. Adam minimises, over random batches of
 * calibration samples {@code x},
 * <pre>
 *   (1/B) sum_x || f(W x + b) - f(W~ x + b) ||^2  +  lambda sum (1 - |2 h(V) - 1|^beta)
 * </pre>
 * where {@code W~} is the soft-rounded weight and {@code f}, {@code b} the calibration's activation and bias
 * (identity and none by default). The regulariser is off for a warm-up share of the iterations; then {@code beta}
 * falls linearly from its start to its end value, pushing every {@code h(V)} to 0 or 1. At the end each weight is
 * rounded up where {@code h(V) >= 0.5}, else down, clamped to the grid's code range: the codes stay on the
 * quantizer's grid (any bits; per-tensor, per-channel or per-group scales).
 *
 * <p>Our addition, on by default and switched off with {@link #polish(boolean) polish(false)}: after the hard
 * rounding an exact flip search (single flips, pairs in short rows, variable-depth chains, per row from the learned
 * rounding and from simple starts) lowers the output error on the whole calibration set further; it never raises it
 * (see {@link #polish(boolean)}). On seeded tiny layers the published method alone lands at 1.0-6x the brute-force
 * optimum and with the search at the optimum ({@code LearnedRoundingTest}); at 512 x 512 the search costs about 1.5 s
 * of CPU. The label ends in {@code ", polish"} when it is on.
 *
 * <p>Defaults, as published (check-values.md section 7; the schedule values are recalled, not confirmed):
 * 10,000 iterations, batches of 32 samples, lambda 0.01, beta 20 to 2, warm-up 20% without regulariser, Adam with
 * learning rate 1e-3 (betas 0.9 / 0.999, epsilon 1e-8); seed 0. Every setting returns a new rule.
 *
 * <p>Progress: every iteration is reported to the {@link Progress} listener under the task
 * {@code "adaptive rounding <name>"} with the batch loss; every 50 iterations the number of decided weights
 * ({@code h(V)} within 1e-3 of 0 or 1) is reported under the task {@code "adaptive rounding <name>: decided"}
 * (done = decided weights, total = all weights), so that its bar fills as the regulariser drives the weights to a
 * side; the undecided share per iteration is in {@link RoundingRun}. If the thread is interrupted, the run stops after the current
 * iteration and keeps its best state so far: the hard rounding of the current {@code V} or of the initial one
 * (rounding to nearest), whichever has the lower output error on the whole calibration set. The interrupt flag stays
 * set for the caller, and {@link RoundingRun#interrupted()} says so. Runs are deterministic for a seed and a
 * linear-algebra backend.
 *
 * <p>Arithmetic: the per-weight work (rectified sigmoid, its derivative, the regulariser, Adam and the next soft
 * weight) runs in float32, fused into one pass per chunk of 1024 weights in loops Java 17's JIT vectorises, with row
 * blocks in parallel (fixed by the layer's shape, so the result does not depend on the number of cores); the two
 * products per iteration are single BLAS calls. The sigmoid is a polynomial within {@code 4e-7} of the
 * double-precision value, the regulariser's power {@code |2h - 1|^(beta - 1)} comes from a float32 log2/exp2 of our
 * own within {@code 1e-5} relative of {@link Math#pow}, and Adam moments below {@code 1e-28} and gradients below
 * {@code 1e-18} are flushed to zero (they would otherwise become subnormal and slow every operation on them; their
 * effect on V is below {@code lr * 1e-10} per step). Loss curves stay as close to the previous implementation as two
 * linear-algebra backends are to each other ({@code bench/results/adaptive-curve-check.md}).
 */
public final class AdaptiveRounding implements LayerRounding {
    private final Calibration calibration;
    private final int iterations;
    private final int batchSize;
    private final double lambda;
    private final double betaStart;
    private final double betaEnd;
    private final double warmup;
    private final double learningRate;
    private final long seed;
    private final Consumer<RoundingRun> listener;
    private final boolean polish;

    private AdaptiveRounding(Calibration calibration, int iterations, int batchSize, double lambda, double betaStart,
            double betaEnd, double warmup, double learningRate, long seed, Consumer<RoundingRun> listener,
            boolean polish) {
        this.calibration = calibration;
        this.iterations = iterations;
        this.batchSize = batchSize;
        this.lambda = lambda;
        this.betaStart = betaStart;
        this.betaEnd = betaEnd;
        this.warmup = warmup;
        this.learningRate = learningRate;
        this.seed = seed;
        this.listener = listener;
        this.polish = polish;
    }

    /**
     * Adaptive rounding with the published defaults, followed by the flip search ({@link #polish(boolean)}; see the
     * class documentation).
     */
    public static AdaptiveRounding of(Calibration calibration) {
        return new AdaptiveRounding(Objects.requireNonNull(calibration, "calibration"), 10_000, 32, 0.01, 20, 2, 0.2,
                1e-3, 0L, null, true);
    }

    /** The number of Adam iterations (default 10,000; at least 1). */
    public AdaptiveRounding iterations(int count) {
        if (count < 1) {
            throw new IllegalArgumentException("iterations must be at least 1, got " + count);
        }
        return new AdaptiveRounding(calibration, count, batchSize, lambda, betaStart, betaEnd, warmup, learningRate,
                seed, listener, polish);
    }

    /** Samples per iteration (default 32); a batch larger than the calibration set uses all samples. */
    public AdaptiveRounding batchSize(int samples) {
        if (samples < 1) {
            throw new IllegalArgumentException("batch size must be at least 1, got " + samples);
        }
        return new AdaptiveRounding(calibration, iterations, samples, lambda, betaStart, betaEnd, warmup,
                learningRate, seed, listener, polish);
    }

    /** The weight of the rounding regulariser (default 0.01; finite and non-negative). */
    public AdaptiveRounding lambda(double weight) {
        if (!(weight >= 0) || !Double.isFinite(weight)) {
            throw new IllegalArgumentException("lambda must be finite and non-negative, got " + weight);
        }
        return new AdaptiveRounding(calibration, iterations, batchSize, weight, betaStart, betaEnd, warmup,
                learningRate, seed, listener, polish);
    }

    /** The exponent schedule of the regulariser: from {@code start} down to {@code end} (default 20 to 2). */
    public AdaptiveRounding beta(double start, double end) {
        if (!(end >= 1) || !(start >= end) || !Double.isFinite(start)) {
            throw new IllegalArgumentException("beta must fall from start to end with start >= end >= 1, got " + start
                    + " to " + end);
        }
        return new AdaptiveRounding(calibration, iterations, batchSize, lambda, start, end, warmup, learningRate,
                seed, listener, polish);
    }

    /** The share of iterations at the start without regulariser (default 0.2; in [0, 1)). */
    public AdaptiveRounding warmup(double share) {
        if (!(share >= 0 && share < 1)) {
            throw new IllegalArgumentException("warm-up must be a share in [0, 1), got " + share);
        }
        return new AdaptiveRounding(calibration, iterations, batchSize, lambda, betaStart, betaEnd, share,
                learningRate, seed, listener, polish);
    }

    /** Adam's learning rate (default 1e-3; positive and finite). */
    public AdaptiveRounding learningRate(double rate) {
        if (!(rate > 0) || !Double.isFinite(rate)) {
            throw new IllegalArgumentException("learning rate must be positive and finite, got " + rate);
        }
        return new AdaptiveRounding(calibration, iterations, batchSize, lambda, betaStart, betaEnd, warmup, rate,
                seed, listener, polish);
    }

    /** The seed of the batch sampling (default 0). */
    public AdaptiveRounding seed(long value) {
        return new AdaptiveRounding(calibration, iterations, batchSize, lambda, betaStart, betaEnd, warmup,
                learningRate, value, listener, polish);
    }

    /**
     * Calls {@code onFinish} with the {@link RoundingRun} (loss and undecided-share histories for a chart) of every
     * run of this rule, also when it runs inside a quantizer. The listener is part of the rule's identity.
     */
    public AdaptiveRounding onFinish(Consumer<RoundingRun> onFinish) {
        return new AdaptiveRounding(calibration, iterations, batchSize, lambda, betaStart, betaEnd, warmup,
                learningRate, seed, Objects.requireNonNull(onFinish, "onFinish"), polish);
    }

    /**
     * Whether the hard rounding is followed by an exact flip search (default on). This is an addition of ours, not
     * part of the published method: after the learned up/down choice, each row's rounding is improved by flipping
     * single weights (and, in rows of at most 64 weights, pairs) between their two candidate codes while that lowers
     * the output error on the whole calibration set, computed exactly from {@code X^T X} and the row's current
     * errors; it never raises that error and the codes stay on the grid. With a following ReLU the search uses the
     * pre-activation error and its result is kept only where the exact after-activation error is not higher. With
     * {@code false} the rule is the published method alone. An interrupted run skips the search.
     */
    public AdaptiveRounding polish(boolean on) {
        return new AdaptiveRounding(calibration, iterations, batchSize, lambda, betaStart, betaEnd, warmup,
                learningRate, seed, listener, on);
    }

    /** Whether the exact flip search follows the published method (see {@link #polish(boolean)}). */
    public boolean polish() {
        return polish;
    }

    /** The calibration inputs. */
    public Calibration calibration() {
        return calibration;
    }

    /** The number of iterations. */
    public int iterations() {
        return iterations;
    }

    /** The batch size. */
    public int batchSize() {
        return batchSize;
    }

    /** The regulariser weight. */
    public double lambda() {
        return lambda;
    }

    /** The start of the beta schedule. */
    public double betaStart() {
        return betaStart;
    }

    /** The end of the beta schedule. */
    public double betaEnd() {
        return betaEnd;
    }

    /** The warm-up share. */
    public double warmup() {
        return warmup;
    }

    /** Adam's learning rate. */
    public double learningRate() {
        return learningRate;
    }

    /** The seed. */
    public long seed() {
        return seed;
    }

    /** The number of warm-up iterations (without regulariser). */
    int warmupIterations() {
        return (int) Math.round(warmup * iterations);
    }

    /**
     * The regulariser exponent at iteration {@code t}: {@code betaStart} until the warm-up ends, then linear down to
     * {@code betaEnd} at the last iteration.
     */
    double betaAt(int t) {
        int start = warmupIterations();
        if (t < start) {
            return betaStart;
        }
        double rel = (t - start) / (double) Math.max(1, iterations - start);
        return betaEnd + (betaStart - betaEnd) * Math.max(0.0, 1.0 - rel);
    }

    @Override
    public String label() {
        return String.format(Locale.ROOT, "adaptive(iterations=%d, batch=%d, lambda=%s, beta=%s->%s, warmup=%s, "
                + "lr=%s, seed=%d%s)", iterations, batchSize, num(lambda), num(betaStart), num(betaEnd), num(warmup),
                num(learningRate), seed, polish ? ", polish" : "");
    }

    private static String num(double v) {
        String s = String.format(Locale.ROOT, "%.6g", v);
        if (s.contains(".") && !s.contains("e")) {
            s = s.replaceAll("0+$", "").replaceAll("\\.$", "");
        }
        return s;
    }

    @Override
    public int[] codes(Tensor weights, GridAssignment grid, Progress progress) {
        return run(weights, grid, progress).codes();
    }

    /** Runs the optimisation on {@code weights} and returns codes, loss history and undecided-share history. */
    public RoundingRun run(Tensor weights, GridAssignment grid, Progress progress) {
        Objects.requireNonNull(weights, "weights");
        Objects.requireNonNull(grid, "grid");
        Objects.requireNonNull(progress, "progress");
        calibration.checkWeight(weights);
        int[] shape = weights.shape();
        if (!Arrays.equals(shape, grid.shape())) {
            throw new IllegalArgumentException(weights.label() + ": weight " + Arrays.toString(shape) + " vs grid "
                    + Arrays.toString(grid.shape()));
        }
        String task = "adaptive rounding " + (weights.name() == null ? "tensor" : weights.name());
        String decidedTask = task + ": decided";
        long t0 = System.nanoTime();
        LinearAlgebra la = LinearAlgebra.instance();
        float[] w = TensorAccess.data(weights);
        AdaptiveObjective obj = objective(la, weights, grid);
        int size = w.length;
        float[] v = obj.initialV(w);
        float[] v0 = v.clone();
        obj.prepare(v);
        obj.resetMoments();
        int n = calibration.samples();
        int count = Math.min(batchSize, n);
        int[] order = new int[n];
        for (int i = 0; i < n; i++) {
            order[i] = i;
        }
        SplittableRandom rng = new SplittableRandom(seed);
        // The histories grow with the iterations done, so that asking for many (and interrupting) costs no memory.
        double[] losses = new double[Math.min(iterations, 1 << 14)];
        double[] undecided = new double[losses.length];
        int warm = warmupIterations();
        int done = 0;
        boolean interrupted = false;
        try {
            for (int t = 0; t < iterations; t++) {
                if (Thread.currentThread().isInterrupted()) {
                    interrupted = true;
                    break;
                }
                // A batch without replacement: a partial Fisher-Yates shuffle of the sample order.
                for (int i = 0; i < count; i++) {
                    int j = i + rng.nextInt(n - i);
                    int tmp = order[i];
                    order[i] = order[j];
                    order[j] = tmp;
                }
                double loss = obj.step(v, order, count, betaAt(t), t >= warm,
                        new AdaptiveObjective.AdamStep(t + 1, learningRate));
                if (t == losses.length) {
                    int grown = (int) Math.min(iterations, 2L * losses.length);
                    losses = Arrays.copyOf(losses, grown);
                    undecided = Arrays.copyOf(undecided, grown);
                }
                losses[t] = loss;
                undecided[t] = obj.undecidedShare();
                done = t + 1;
                progress.update(task, done, iterations, loss);
                if (done % 50 == 0 || done == iterations) {
                    progress.update(decidedTask, size - Math.round(undecided[t] * size), size, Double.NaN);
                }
            }
        } finally {
            progress.finish(task);
            progress.finish(decidedTask);
        }
        int[] codes = obj.hardCodes(v);
        if (polish && !interrupted) {
            int[] better = FlipSearch.improve(la, obj, w, TensorAccess.data(calibration.inputs()),
                    calibration.samples(), codes);
            // Exact for the identity (a quadratic); after a ReLU, kept only where the true error is not higher.
            if (calibration.activation() == Calibration.Activation.IDENTITY
                    || obj.fullError(obj.values(better)) <= obj.fullError(obj.values(codes))) {
                codes = better;
            }
        }
        List<String> warnings = new ArrayList<>();
        if (interrupted) {
            int[] start = obj.hardCodes(v0);
            double now = obj.fullError(obj.values(codes));
            double before = obj.fullError(obj.values(start));
            if (before < now) {
                codes = start;
                warnings.add("interrupted after " + done + " of " + iterations + " iterations; the initial rounding"
                        + " (to nearest) had the lower output error and is kept");
            } else {
                warnings.add("interrupted after " + done + " of " + iterations + " iterations; the rounding learned"
                        + " so far is kept");
            }
        }
        RoundingRun run = new RoundingRun(label(), weights.label(), codes, Arrays.copyOf(losses, done),
                Arrays.copyOf(undecided, done), done, interrupted, warnings, la.backend(),
                (System.nanoTime() - t0) / 1e9);
        if (listener != null) {
            listener.accept(run);
        }
        return run;
    }

    /** The objective for this rule's calibration on {@code weights}. */
    AdaptiveObjective objective(LinearAlgebra la, Tensor weights, GridAssignment grid) {
        int[] shape = weights.shape();
        float[] bias = calibration.bias().map(TensorAccess::data).orElse(null);
        return new AdaptiveObjective(la, TensorAccess.data(weights), shape[0], shape[1],
                TensorAccess.data(calibration.inputs()), calibration.samples(), bias, calibration.activation(), grid,
                lambda);
    }

    @Override
    public boolean equals(Object o) {
        if (!(o instanceof AdaptiveRounding)) {
            return false;
        }
        AdaptiveRounding r = (AdaptiveRounding) o;
        return calibration.equals(r.calibration) && iterations == r.iterations && batchSize == r.batchSize
                && Double.compare(lambda, r.lambda) == 0 && Double.compare(betaStart, r.betaStart) == 0
                && Double.compare(betaEnd, r.betaEnd) == 0 && Double.compare(warmup, r.warmup) == 0
                && Double.compare(learningRate, r.learningRate) == 0 && seed == r.seed
                && Objects.equals(listener, r.listener) && polish == r.polish;
    }

    @Override
    public int hashCode() {
        return Objects.hash(calibration, iterations, batchSize, lambda, betaStart, betaEnd, warmup, learningRate, seed,
                listener, polish);
    }

    @Override
    public String toString() {
        return label();
    }
}
