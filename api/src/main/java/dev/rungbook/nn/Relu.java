package dev.rungbook.nn;

import dev.rungbook.internal.TensorAccess;
import dev.rungbook.tensor.DType;
import dev.rungbook.tensor.Tensor;

/** The rectifier {@code max(0, x)}, element-wise. */
public final class Relu implements Layer {
    private final String name;

    /** @param name the layer's name, e.g. {@code relu1} */
    public Relu(String name) {
        this.name = name;
    }

    @Override
    public String name() {
        return name;
    }

    @Override
    public Tensor forward(Tensor batch) {
        float[] x = TensorAccess.data(batch);
        float[] y = new float[x.length];
        for (int i = 0; i < x.length; i++) {
            y[i] = Math.max(0f, x[i]);
        }
        return TensorAccess.wrap(y, batch.shape(), DType.F32, null);
    }

    @Override
    public String toString() {
        return "ReLU " + name;
    }
}
