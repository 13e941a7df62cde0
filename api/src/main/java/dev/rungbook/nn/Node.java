package dev.rungbook.nn;

import java.util.Arrays;
import java.util.List;
import java.util.function.Function;

/**
 * Package-private: the differentiable form of one layer during a training run. It holds mutable copies of the
 * layer's parameters (which the optimiser updates in place), keeps what its backward pass needs from the last forward
 * pass, and turns back into an immutable {@link Layer} at the end. Layers make their node with a package-private
 * {@code node()} method; {@link #of} dispatches.
 */
abstract class Node {
    /** A batch of activations: row-major values and their shape, first axis the sample index. */
    record Act(float[] v, int[] shape) {
        int batch() {
            return shape[0];
        }

        /** Elements per sample. */
        int perSample() {
            return v.length / shape[0];
        }
    }

    /** A trainable parameter: its values (updated in place), its gradient and whether weight decay applies. */
    static final class Param {
        final String name;
        final float[] value;
        final float[] grad;
        final boolean decay;

        Param(String name, float[] value, boolean decay) {
            this.name = name;
            this.value = value;
            this.grad = new float[value.length];
            this.decay = decay;
        }

        void zeroGrad() {
            Arrays.fill(grad, 0f);
        }
    }

    /**
     * The forward pass. With {@code training} true the node uses batch statistics where it has them (BatchNorm) and
     * keeps what {@link #backward} needs.
     */
    abstract Act forward(Act x, boolean training);

    /**
     * The backward pass of the last training forward pass: adds the gradients of the loss with respect to this
     * node's parameters to their {@link Param#grad} and returns the gradient with respect to the input (or
     * {@code null} when {@code needInput} is false and the node can skip it).
     */
    abstract Act backward(Act gy, boolean needInput);

    /** The trainable parameters (none by default). */
    List<Param> params() {
        return List.of();
    }

    /** The immutable layer holding the current parameter values. */
    abstract Layer layer();

    /**
     * The node of a layer, or an error naming the layer if it cannot be trained. Weighted layers get the transform
     * {@code quantization} gives them ({@code null}: none).
     */
    static Node of(Layer l, Function<WeightedLayer, WeightTransform> quantization) {
        if (l instanceof Linear) {
            return ((Linear) l).node(quantization.apply((Linear) l));
        } else if (l instanceof Conv2d) {
            return ((Conv2d) l).node(quantization.apply((Conv2d) l));
        } else if (l instanceof BatchNorm) {
            return ((BatchNorm) l).node();
        } else if (l instanceof Relu) {
            return ((Relu) l).node();
        } else if (l instanceof Relu6) {
            return ((Relu6) l).node();
        } else if (l instanceof Identity) {
            return ((Identity) l).node();
        } else if (l instanceof Flatten) {
            return ((Flatten) l).node();
        } else if (l instanceof Pool2d) {
            return ((Pool2d) l).node();
        }
        throw new IllegalArgumentException("training does not handle layer '" + l.name() + "' ("
                + l.getClass().getSimpleName() + "); it handles Linear, Conv2d, BatchNorm, ReLU, ReLU6, identity, "
                + "flatten and pooling layers");
    }

    /** A node without parameters (activations, reshaping, pooling): its layer never changes. */
    abstract static class ParameterFree extends Node {
        private final Layer layer;

        ParameterFree(Layer layer) {
            this.layer = layer;
        }

        @Override
        Layer layer() {
            return layer;
        }
    }
}
