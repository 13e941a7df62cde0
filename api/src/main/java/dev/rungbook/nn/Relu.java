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

    /** The training node: the gradient passes where the output is positive. */
    Node node() {
        return new Node.ParameterFree(this) {
            private float[] y;

            @Override
            Act forward(Act a, boolean training) {
                float[] x = a.v();
                y = new float[x.length];
                for (int i = 0; i < x.length; i++) {
                    y[i] = Math.max(0f, x[i]);
                }
                return new Act(y, a.shape());
            }

            @Override
            Act backward(Act gy, boolean needInput) {
                float[] g = gy.v();
                float[] gx = new float[g.length];
                for (int i = 0; i < g.length; i++) {
                    gx[i] = y[i] <= 0f ? 0f : g[i];
                }
                return new Act(gx, gy.shape());
            }
        };
    }

    @Override
    public String toString() {
        return "ReLU " + name;
    }
}
