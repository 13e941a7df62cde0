package dev.rungbook.nn;

import dev.rungbook.quant.Granularity;
import dev.rungbook.quant.Quantizer;
import dev.rungbook.range.RangeRule;
import dev.rungbook.round.Calibration;
import dev.rungbook.round.LayerRounding;
import dev.rungbook.round.Rounding;
import java.util.Objects;
import java.util.Optional;
import java.util.function.Function;

/**
 * How one weighted layer of a {@link NetworkQuantization} is quantized: a weight quantizer (or float weights), an
 * optional learned rounding fed with the layer's calibration inputs, and an activation quantizer for the layer's
 * output with the range rule that calibrates it (or a float output). Immutable; every step returns a new value.
 *
 * <p>Defaults ({@link #standard()}; common practice for integer-only inference):
 * <ul>
 *   <li>weights {@code Quantizer.linear(8)}: int8, symmetric, one scale per output channel (axis 0), min-max range,
 *       round to nearest with ties to even;</li>
 *   <li>activations {@code Quantizer.linear(8).asymmetric().unsigned().perTensor()}: codes 0..255 with a zero point,
 *       one scale per tensor;</li>
 *   <li>activation range {@link RangeRule#minMax()} over all calibration samples.</li>
 * </ul>
 *
 * <p>The activation quantizer acts on the tensor the layer hands on: its output after the non-weighted layers that
 * follow it (ReLU, flatten, ...), which is the tensor the next weighted layer reads or the network's output. That is
 * where an integer-only device keeps activations (ReLU folded into the requantization clamp). The network's input
 * has a quantizer of its own ({@link NetworkQuantization#input}).
 */
public final class LayerQuantization {
    private static final LayerQuantization STANDARD = new LayerQuantization(Quantizer.linear(8), null,
            Quantizer.linear(8).asymmetric().unsigned().perTensor(), RangeRule.minMax());

    private final Quantizer weights;
    private final Function<Calibration, ? extends Rounding> learnedRounding;
    private final Quantizer activations;
    private final RangeRule activationRange;

    private LayerQuantization(Quantizer weights, Function<Calibration, ? extends Rounding> learnedRounding,
            Quantizer activations, RangeRule activationRange) {
        this.weights = weights;
        this.learnedRounding = learnedRounding;
        this.activations = activations;
        this.activationRange = activationRange;
    }

    /** The defaults: int8 per-channel weights, uint8 per-tensor asymmetric activations, min-max ranges. */
    public static LayerQuantization standard() {
        return STANDARD;
    }

    /** Everything float: no weight and no activation quantization. */
    public static LayerQuantization none() {
        return new LayerQuantization(null, null, null, RangeRule.minMax());
    }

    /** The same with weight quantizer {@code q} (any grid, granularity, range rule and rounding of the core). */
    public LayerQuantization weights(Quantizer q) {
        return new LayerQuantization(Objects.requireNonNull(q, "weight quantizer"), learnedRounding, activations,
                activationRange);
    }

    /** The same with float weights (and no learned rounding). */
    public LayerQuantization floatWeights() {
        return new LayerQuantization(null, null, activations, activationRange);
    }

    /**
     * The same with a learned rounding made per layer from its calibration inputs, for example
     * {@code cal -> Rounding.adaptive(cal).iterations(2000)} or {@code Rounding::errorFeedback}. At calibration the
     * layer's inputs (as the network quantized up to that layer produces them), its bias and its following ReLU (if
     * any) are captured into a {@link Calibration}, and the weight quantizer runs with {@code factory.apply(cal)} as
     * its rounding. The rounding must be a {@link LayerRounding} or an element rule. For a convolution the captured
     * inputs are its receptive fields as rows (one per sample and output position, taps ordered like the weight's
     * {@code [in, kh, kw]}) and its weight is rounded as the matrix {@code [out, in*kh*kw]}, so its quantizer must be
     * per tensor or per output channel (axis 0).
     */
    public LayerQuantization learnedRounding(Function<Calibration, ? extends Rounding> factory) {
        return new LayerQuantization(weights, Objects.requireNonNull(factory, "rounding factory"), activations,
                activationRange);
    }

    /** The same without a learned rounding: the weight quantizer's own rounding is used. */
    public LayerQuantization withoutLearnedRounding() {
        return new LayerQuantization(weights, null, activations, activationRange);
    }

    /**
     * The same with activation quantizer {@code q} for the layer's output. It must be one scale per tensor and take a
     * range rule (linear, scaled float, logarithmic grids); its own range rule is replaced by
     * {@link #activationRange}.
     *
     * @throws IllegalArgumentException naming the quantizer if it does not qualify
     */
    public LayerQuantization activations(Quantizer q) {
        checkActivationQuantizer(Objects.requireNonNull(q, "activation quantizer"), "activation quantizer");
        return new LayerQuantization(weights, learnedRounding, q, activationRange);
    }

    /** The same with a float output. */
    public LayerQuantization floatActivations() {
        return new LayerQuantization(weights, learnedRounding, null, activationRange);
    }

    /**
     * The same with range rule {@code rule} for the output activation, applied to the stacked outputs of all
     * calibration samples (rows in order): {@link RangeRule#minMax()}, {@link RangeRule#percentile},
     * {@link RangeRule#mse()}, {@link RangeRule#entropy()}, or {@link RangeRule#running(double, int)} with the
     * number of samples per calibration batch (each run of that many rows is one batch of the moving average).
     */
    public LayerQuantization activationRange(RangeRule rule) {
        return new LayerQuantization(weights, learnedRounding, activations, Objects.requireNonNull(rule, "range"));
    }

    /** The weight quantizer, empty for float weights. */
    public Optional<Quantizer> weights() {
        return Optional.ofNullable(weights);
    }

    /** The learned-rounding factory, if any. */
    public Optional<Function<Calibration, ? extends Rounding>> learnedRounding() {
        return Optional.ofNullable(learnedRounding);
    }

    /** The activation quantizer of the layer's output, empty for a float output. */
    public Optional<Quantizer> activations() {
        return Optional.ofNullable(activations);
    }

    /** The range rule of the output activation. */
    public RangeRule activationRange() {
        return activationRange;
    }

    /** A short label of the weights, e.g. {@code int8 sym per-channel(0)} or {@code float}. */
    public String weightLabel() {
        if (weights == null) {
            return "float";
        }
        return weights.label() + (learnedRounding != null ? " + learned rounding" : "");
    }

    /** A short label of the output activation, e.g. {@code uint8 asym per-tensor minmax} or {@code float}. */
    public String activationLabel() {
        return activations == null ? "float" : activations.label() + " " + activationRange.label();
    }

    static void checkActivationQuantizer(Quantizer q, String what) {
        if (!q.granularity().equals(Granularity.perTensor())) {
            throw new IllegalArgumentException(what + " '" + q.label() + "': activations take one scale per tensor "
                    + "(use perTensor())");
        }
        if (q.rounding() instanceof LayerRounding) {
            throw new IllegalArgumentException(what + " '" + q.label() + "': activations take an element rounding, "
                    + "not a learned one");
        }
        q.range(RangeRule.minMax()); // refuses grids without a range rule, naming the quantizer
    }

    @Override
    public boolean equals(Object o) {
        if (!(o instanceof LayerQuantization)) {
            return false;
        }
        LayerQuantization l = (LayerQuantization) o;
        return Objects.equals(weights, l.weights) && Objects.equals(learnedRounding, l.learnedRounding)
                && Objects.equals(activations, l.activations) && activationRange.equals(l.activationRange);
    }

    @Override
    public int hashCode() {
        return Objects.hash(weights, learnedRounding, activations, activationRange);
    }

    /** For example {@code weights int8 sym per-channel(0), output uint8 asym per-tensor minmax}. */
    @Override
    public String toString() {
        return "weights " + weightLabel() + ", output " + activationLabel();
    }
}
