package dev.rungbook.nn;

import dev.rungbook.tensor.Tensor;

/** A layer that passes its input through unchanged (a placeholder, for example for an activation-free output). */
public final class Identity implements Layer {
    private final String name;

    /** @param name the layer's name */
    public Identity(String name) {
        this.name = name;
    }

    @Override
    public String name() {
        return name;
    }

    @Override
    public Tensor forward(Tensor batch) {
        return batch;
    }

    Node node() {
        return new Node.ParameterFree(this) {
            @Override
            Act forward(Act a, boolean training) {
                return a;
            }

            @Override
            Act backward(Act gy, boolean needInput) {
                return gy;
            }
        };
    }

    @Override
    public String toString() {
        return "Identity " + name;
    }
}
