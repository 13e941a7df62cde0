package dev.rungbook.nn;

import dev.rungbook.tensor.Tensor;

/** Reshapes a batch {@code [N, d1, d2, ...]} to {@code [N, d1 * d2 * ...]} (row-major order is kept). */
public final class Flatten implements Layer {
    private final String name;

    /** @param name the layer's name */
    public Flatten(String name) {
        this.name = name;
    }

    @Override
    public String name() {
        return name;
    }

    private int[] flat(int[] shape) {
        if (shape.length < 1) {
            throw new IllegalArgumentException(name + ": cannot flatten a scalar");
        }
        int rest = 1;
        for (int i = 1; i < shape.length; i++) {
            rest *= shape[i];
        }
        return new int[] {shape[0], rest};
    }

    @Override
    public Tensor forward(Tensor batch) {
        return batch.reshape(flat(batch.shape()));
    }

    Node node() {
        return new Node.ParameterFree(this) {
            private int[] in;

            @Override
            Act forward(Act a, boolean training) {
                in = a.shape();
                return new Act(a.v(), flat(in));
            }

            @Override
            Act backward(Act gy, boolean needInput) {
                return new Act(gy.v(), in);
            }
        };
    }

    @Override
    public String toString() {
        return "Flatten " + name;
    }
}
