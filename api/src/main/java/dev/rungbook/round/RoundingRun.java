package dev.rungbook.round;

import java.util.Arrays;
import java.util.List;

/**
 * What one run of a learned rounding rule produced: the codes and how the run went (loss history for a chart,
 * warnings, whether it was interrupted, which linear-algebra backend did the products). Returned by
 * {@link AdaptiveRounding#run} and {@link ErrorFeedbackRounding#run}, and handed to a rule's
 * {@code onFinish} listener when the rule runs inside a quantizer.
 *
 * <p>Immutable: the arrays are copied on the way in and out.
 */
public final class RoundingRun {
    private final String rule;
    private final String tensor;
    private final int[] codes;
    private final double[] lossHistory;
    private final double[] undecidedHistory;
    private final int steps;
    private final boolean interrupted;
    private final List<String> warnings;
    private final String backend;
    private final double seconds;

    RoundingRun(String rule, String tensor, int[] codes, double[] lossHistory, double[] undecidedHistory, int steps,
            boolean interrupted, List<String> warnings, String backend, double seconds) {
        this.rule = rule;
        this.tensor = tensor;
        this.codes = codes.clone();
        this.lossHistory = lossHistory.clone();
        this.undecidedHistory = undecidedHistory.clone();
        this.steps = steps;
        this.interrupted = interrupted;
        this.warnings = List.copyOf(warnings);
        this.backend = backend;
        this.seconds = seconds;
    }

    /** The label of the rule that ran. */
    public String rule() {
        return rule;
    }

    /** The label of the weight tensor, e.g. {@code tensor 'fc1.weight'}. */
    public String tensor() {
        return tensor;
    }

    /** The integer codes, row-major, one per weight (a copy). */
    public int[] codes() {
        return codes.clone();
    }

    /**
     * The loss after each step (a copy): for adaptive rounding the mini-batch objective (output error plus
     * regulariser) of every iteration; for error-feedback rounding the accumulated proxy loss
     * {@code sum (w - q)^2 / (2 d^2)} after each block of columns.
     */
    public double[] lossHistory() {
        return lossHistory.clone();
    }

    /**
     * For adaptive rounding, the share of weights still undecided (rectified sigmoid not within 1e-3 of 0 or 1)
     * after each iteration; empty for error-feedback rounding (a copy).
     */
    public double[] undecidedHistory() {
        return undecidedHistory.clone();
    }

    /** The steps done: iterations (adaptive) or column blocks (error feedback). */
    public int steps() {
        return steps;
    }

    /** True when the run stopped early because its thread was interrupted (the codes are then its best so far). */
    public boolean interrupted() {
        return interrupted;
    }

    /** Things the user should know (e.g. damping raised for an ill-conditioned Hessian); empty when none. */
    public List<String> warnings() {
        return warnings;
    }

    /** The linear-algebra backend used, e.g. {@code native BLAS (JNIBLAS, OpenBLAS)}. */
    public String backend() {
        return backend;
    }

    /** Wall-clock seconds the run took. */
    public double seconds() {
        return seconds;
    }

    @Override
    public String toString() {
        return "RoundingRun[" + rule + " on " + tensor + ", " + steps + " steps"
                + (lossHistory.length > 0 ? ", final loss " + lossHistory[lossHistory.length - 1] : "")
                + (interrupted ? ", interrupted" : "") + (warnings.isEmpty() ? "" : ", warnings " + warnings)
                + ", " + String.format(java.util.Locale.ROOT, "%.2f s", seconds) + ", " + backend + "]";
    }

    /** Codes equal and the same history; used by determinism checks. */
    boolean sameOutcome(RoundingRun o) {
        return Arrays.equals(codes, o.codes) && Arrays.equals(lossHistory, o.lossHistory);
    }
}
