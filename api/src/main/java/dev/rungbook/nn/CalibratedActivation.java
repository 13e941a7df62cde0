package dev.rungbook.nn;

import dev.rungbook.quant.Quantizer;
import dev.rungbook.range.Range;
import dev.rungbook.tensor.Tensor;
import java.util.Objects;

/**
 * An activation quantizer after calibration: where it sits ({@code input} or a layer name), the range its rule chose
 * on the calibration samples, the quantizer frozen to that range ({@code RangeRule.fixed}), and the resulting scale
 * and zero point (for linear grids; a float grid's zero point is 0).
 *
 * @param at {@code input} or the name of the weighted layer whose output this quantizes
 * @param quantizer the activation quantizer with its range fixed to {@link #range}
 * @param range the calibrated clipping range
 * @param scale the scale the range gives on the quantizer's grid
 * @param zeroPoint the zero point (in codes) the range gives on the quantizer's grid
 */
public record CalibratedActivation(String at, Quantizer quantizer, Range range, double scale, double zeroPoint) {
    /** Checks that nothing is missing. */
    public CalibratedActivation {
        Objects.requireNonNull(at, "at");
        Objects.requireNonNull(quantizer, "quantizer");
        Objects.requireNonNull(range, "range");
    }

    /** The fake-quantized activation: {@code t} quantized with the fixed range and dequantized. */
    public Tensor apply(Tensor t) {
        return quantizer.apply(t).dequantized();
    }
}
