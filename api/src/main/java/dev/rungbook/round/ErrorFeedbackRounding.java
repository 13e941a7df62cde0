package dev.rungbook.round;

import dev.rungbook.internal.LinearAlgebra;
import dev.rungbook.internal.TensorAccess;
import dev.rungbook.progress.Progress;
import dev.rungbook.tensor.Tensor;
import java.util.Arrays;
import java.util.Locale;
import java.util.Objects;
import java.util.function.Consumer;

/**
 * Error-feedback rounding (GPTQ; Frantar et al., ICLR 2023): the columns of a weight {@code W} ({@code out x in})
 * are rounded one at a time and each column's rounding error is fed back into the columns not yet rounded, weighted
 * by the inverse Hessian of the layer's squared output error on the calibration inputs, so that later weights make
 * up for earlier errors.
 *
 * <p>The procedure, as published: {@code H = 2 X^T X} over the calibration samples, plus damping of 1% of its mean
 * diagonal (settable with {@link #damping}); {@code U} the upper Cholesky factor of {@code H^-1}; column {@code j}:
 * {@code e = (w_j - q(w_j)) / U_jj}, later columns {@code w_k -= e U_jk}; blocks of 128 columns with lazy batch
 * updates of the columns after the block. Inputs that are zero on every sample ({@code H_ii = 0}) get
 * {@code H_ii = 1} and their weights are set to 0, as published (they never reach the output on the calibration
 * set); the run reports this as a warning. If {@code H} plus damping is not positive definite, damping is raised ten
 * times at a time (up to 1000% of the mean diagonal) and the run says so in its warnings; values are never NaN.
 *
 * <p>Codes stay on the quantizer's grid (any bits, per tensor, per channel or per group, clamped to the code
 * range). With a per-group grid along the input axis, the published method fits a group's scale from the updated
 * weights when it reaches the group; that needs the quantizer to pass its scale rule ({@link #codes(Tensor,
 * GridAssignment, SegmentRefit, float[], float[], Progress)}); through the plain {@link LayerRounding} call the
 * quantizer's group scales, fitted to the original weights, are used ("static groups"). With activation order the
 * groups are always static, since the grid's groups are contiguous in the original column order.
 *
 * <p>Optional activation order ({@link #activationOrder}) rounds the columns with the largest {@code H_ii} first;
 * the codes come back in the original order. Error feedback minimises the pre-activation error: the calibration's
 * bias and activation are not used.
 *
 * <p>Immutable; every setting returns a new rule.
 */
public final class ErrorFeedbackRounding implements LayerRounding {
    private final Calibration calibration;
    private final double damping;
    private final int blockSize;
    private final boolean activationOrder;
    private final Consumer<RoundingRun> listener;

    private ErrorFeedbackRounding(Calibration calibration, double damping, int blockSize, boolean activationOrder,
            Consumer<RoundingRun> listener) {
        this.calibration = calibration;
        this.damping = damping;
        this.blockSize = blockSize;
        this.activationOrder = activationOrder;
        this.listener = listener;
    }

    /** Error-feedback rounding with the published defaults: damping 1%, blocks of 128, natural column order. */
    public static ErrorFeedbackRounding of(Calibration calibration) {
        return new ErrorFeedbackRounding(Objects.requireNonNull(calibration, "calibration"), 0.01, 128, false, null);
    }

    /**
     * Damping added to the diagonal of {@code H}, as a share of its mean diagonal (default 0.01).
     *
     * @throws IllegalArgumentException unless {@code 0 <= share <= 10}
     */
    public ErrorFeedbackRounding damping(double share) {
        if (!(share >= 0 && share <= ErrorFeedback.MAX_DAMPING)) {
            throw new IllegalArgumentException("damping must be in [0, " + ErrorFeedback.MAX_DAMPING + "] (a share of"
                    + " the mean diagonal), got " + share);
        }
        return new ErrorFeedbackRounding(calibration, share, blockSize, activationOrder, listener);
    }

    /**
     * Columns per block of the lazy batch update (default 128). The result does not depend on it (up to float
     * rounding); only the speed does.
     */
    public ErrorFeedbackRounding blockSize(int columns) {
        if (columns < 1) {
            throw new IllegalArgumentException("block size must be at least 1, got " + columns);
        }
        return new ErrorFeedbackRounding(calibration, damping, columns, activationOrder, listener);
    }

    /** Whether to round the columns with the largest Hessian diagonal first (default false). */
    public ErrorFeedbackRounding activationOrder(boolean on) {
        return new ErrorFeedbackRounding(calibration, damping, blockSize, on, listener);
    }

    /**
     * Calls {@code onFinish} with the {@link RoundingRun} (warnings, proxy-loss history) of every run of this rule,
     * also when it runs inside a quantizer. The listener is part of the rule's identity.
     */
    public ErrorFeedbackRounding onFinish(Consumer<RoundingRun> onFinish) {
        return new ErrorFeedbackRounding(calibration, damping, blockSize, activationOrder,
                Objects.requireNonNull(onFinish, "onFinish"));
    }

    /** The calibration inputs. */
    public Calibration calibration() {
        return calibration;
    }

    /** The damping share. */
    public double damping() {
        return damping;
    }

    /** The block size. */
    public int blockSize() {
        return blockSize;
    }

    /** Whether activation order is on. */
    public boolean activationOrder() {
        return activationOrder;
    }

    @Override
    public String label() {
        return "error-feedback(damping=" + String.format(Locale.ROOT, "%g", damping).replaceAll("0+$", "")
                + ", block=" + blockSize + (activationOrder ? ", activation-order" : "") + ")";
    }

    @Override
    public int[] codes(Tensor weights, GridAssignment grid, Progress progress) {
        return run(weights, grid, null, null, null, progress).codes();
    }

    /**
     * The codes, with group grids refitted from the updated weights as published (see the class documentation).
     * The quantizer calls this with its own range rule and scale logic as {@code refit} and its scale and zero point
     * arrays, which are updated in place for the refitted groups.
     *
     * @param refit computes a segment's {@code {scale, zeroPoint}} from its current values
     * @param scales the quantizer's scales, one per segment; refitted entries are overwritten
     * @param zeroPoints the quantizer's zero points, one per segment; refitted entries are overwritten
     */
    public int[] codes(Tensor weights, GridAssignment grid, SegmentRefit refit, float[] scales, float[] zeroPoints,
            Progress progress) {
        Objects.requireNonNull(refit, "refit");
        return run(weights, grid, refit, scales, zeroPoints, progress).codes();
    }

    /** Runs the rule on {@code weights} with the grid's fixed scales and returns codes, loss history and warnings. */
    public RoundingRun run(Tensor weights, GridAssignment grid, Progress progress) {
        return run(weights, grid, null, null, null, progress);
    }

    private RoundingRun run(Tensor weights, GridAssignment grid, SegmentRefit refit, float[] scales, float[] zps,
            Progress progress) {
        Objects.requireNonNull(weights, "weights");
        Objects.requireNonNull(grid, "grid");
        Objects.requireNonNull(progress, "progress");
        calibration.checkWeight(weights);
        int[] shape = weights.shape();
        if (!Arrays.equals(shape, grid.shape())) {
            throw new IllegalArgumentException(weights.label() + ": weight " + Arrays.toString(shape) + " vs grid "
                    + Arrays.toString(grid.shape()));
        }
        float[] sc = scales != null ? scales : grid.scales();
        float[] zp = zeroPoints(zps, grid);
        if (sc.length != grid.segmentCount() || zp.length != grid.segmentCount()) {
            throw new IllegalArgumentException(weights.label() + ": " + grid.segmentCount() + " segments need as many"
                    + " scales and zero points, got " + sc.length + " and " + zp.length);
        }
        String task = "error-feedback rounding " + (weights.name() == null ? "tensor" : weights.name());
        long t0 = System.nanoTime();
        LinearAlgebra la = LinearAlgebra.instance();
        Tensor x = calibration.inputs();
        ErrorFeedback.Outcome o;
        try {
            o = ErrorFeedback.run(la, TensorAccess.data(weights), shape[0], shape[1], TensorAccess.data(x),
                    calibration.samples(), grid, sc, zp, refit, damping, blockSize, activationOrder, progress, task);
        } finally {
            progress.finish(task);
        }
        RoundingRun run = new RoundingRun(label(), weights.label(), o.codes, o.loss, new double[0], o.loss.length,
                false, o.warnings, la.backend(), (System.nanoTime() - t0) / 1e9);
        if (listener != null) {
            listener.accept(run);
        }
        return run;
    }

    private static float[] zeroPoints(float[] given, GridAssignment grid) {
        return given != null ? given : grid.zeroPoints();
    }

    @Override
    public boolean equals(Object o) {
        if (!(o instanceof ErrorFeedbackRounding)) {
            return false;
        }
        ErrorFeedbackRounding r = (ErrorFeedbackRounding) o;
        return calibration.equals(r.calibration) && Double.compare(damping, r.damping) == 0
                && blockSize == r.blockSize && activationOrder == r.activationOrder
                && Objects.equals(listener, r.listener);
    }

    @Override
    public int hashCode() {
        return Objects.hash(calibration, damping, blockSize, activationOrder, listener);
    }

    @Override
    public String toString() {
        return label();
    }
}
