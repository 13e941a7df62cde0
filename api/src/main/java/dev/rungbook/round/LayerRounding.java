package dev.rungbook.round;

import dev.rungbook.progress.Progress;
import dev.rungbook.tensor.Tensor;

/**
 * A rounding rule that decides all codes of a weight tensor at once, so that the rounding of one weight may depend
 * on the others and on calibration inputs (adaptive rounding, error-feedback rounding).
 *
 * <p>The quantizer first fixes the grid (scales, zero points and code range per channel or group, from its range
 * rule) and hands it over as a {@link GridAssignment}; the rule returns one code per element. Codes must lie in
 * {@code [grid.qmin(), grid.qmax()]}; the quantizer checks this and refuses anything else with an error naming the
 * rule and the first bad element.
 *
 * <p>Long-running rules report to {@code progress} and check {@link Progress#checkInterrupted(String)} each step.
 */
public interface LayerRounding extends Rounding {
    /**
     * The codes of {@code weights} in row-major order, one per element.
     *
     * @param weights the tensor being quantized (not modified)
     * @param grid where each element sits: its scale, zero point and the code range
     * @param progress where to report progress
     */
    int[] codes(Tensor weights, GridAssignment grid, Progress progress);
}
