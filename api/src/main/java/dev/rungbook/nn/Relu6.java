package dev.rungbook.nn;

import dev.rungbook.internal.TensorAccess;
import dev.rungbook.tensor.DType;
import dev.rungbook.tensor.Tensor;

/** The clipped rectifier {@code min(max(0, x), 6)}, element-wise (a bounded activation range suits fixed point). */
public final class Relu6 implements Layer {
    /** The upper clip, 6. */
    public static final float CEILING = 6f;

    private final String name;

    /** @param name the layer's name, e.g. {@code relu6_1} */
    public Relu6(String name) {
        this.name = name;
    }

    @Override
    public String name() {
        return name;
    }

    private static float[] clip(float[] x) {
        float[] y = new float[x.length];
        for (int i = 0; i < x.length; i++) {
            y[i] = Math.min(CEILING, Math.max(0f, x[i]));
        }
        return y;
    }

    @Override
    public Tensor forward(Tensor batch) {
        return TensorAccess.wrap(clip(TensorAccess.data(batch)), batch.shape(), DType.F32, null);
    }

    /** The training node: the gradient passes where {@code 0 < x < 6}. */
    Node node() {
        return new Node.ParameterFree(this) {
            private float[] x;

            @Override
            Act forward(Act a, boolean training) {
                x = a.v();
                return new Act(clip(x), a.shape());
            }

            @Override
            Act backward(Act gy, boolean needInput) {
                float[] g = gy.v();
                float[] gx = new float[g.length];
                for (int i = 0; i < g.length; i++) {
                    gx[i] = x[i] > 0f && x[i] < CEILING ? g[i] : 0f;
                }
                return new Act(gx, gy.shape());
            }
        };
    }

    @Override
    public String toString() {
        return "ReLU6 " + name;
    }
}
