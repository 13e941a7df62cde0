package dev.rungbook.nn;

import dev.rungbook.tensor.Tensor;

/**
 * A layer with a weight tensor and a bias that quantization, equalization and planning act on (linear and
 * convolution layers). Implementations are immutable: {@link #withWeight} and {@link #withBias} return new layers.
 *
 * <p>The weight's axis 0 is always the output channel, so {@code Quantizer.linear(8).perChannel(0)} means per output
 * channel for every implementation.
 */
public interface WeightedLayer extends Layer {
    /** The weight; axis 0 is the output channel. */
    Tensor weight();

    /** The bias, shaped {@code [out]}. */
    Tensor bias();

    /** The same layer with another weight of the same shape (for example a dequantized one). */
    WeightedLayer withWeight(Tensor newWeight);

    /** The same layer with another bias of the same shape. */
    WeightedLayer withBias(Tensor newBias);
}
