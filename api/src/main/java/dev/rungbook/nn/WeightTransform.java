package dev.rungbook.nn;

import java.util.List;

/**
 * Package-private: what quantization-aware training does to a weight. {@link #forward} maps the full-precision
 * (latent) weight to the weight the forward pass uses; {@link #backward} maps the gradient with respect to that weight
 * to the latent weight's gradient and adds the gradients of the transform's own parameters (learned scales).
 */
interface WeightTransform {
    /** Called once with the layer's copy of its weight before training; may rescale it and set initial scales. */
    default void prepare(float[] latent) {
    }

    /** The weight the forward pass uses, as a new array; {@code latent} is not modified. */
    float[] forward(float[] latent);

    /** Adds the latent weight's gradient to {@code gLatent} given {@code gEffective}, and the own parameters' ones. */
    void backward(float[] latent, float[] gEffective, float[] gLatent);

    /** The transform's trainable parameters (learned scales), or none. */
    List<Node.Param> params();
}
