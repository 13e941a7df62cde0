package dev.rungbook.nn;

import dev.rungbook.internal.TensorAccess;
import dev.rungbook.tensor.DType;
import dev.rungbook.tensor.Tensor;
import java.util.Arrays;

/**
 * Max or average pooling over square windows of NCHW batches, without padding: output
 * {@code [N, C, (H - k) / stride + 1, (W - k) / stride + 1]}. Max pooling sends the gradient to the first largest
 * value of each window; average pooling spreads it evenly.
 */
public final class Pool2d implements Layer {
    private final String name;
    private final boolean max;
    private final int kernel;
    private final int stride;

    private Pool2d(String name, boolean max, int kernel, int stride) {
        if (kernel < 1 || stride < 1) {
            throw new IllegalArgumentException(name + ": pooling kernel and stride must be at least 1, got kernel "
                    + kernel + ", stride " + stride);
        }
        this.name = name;
        this.max = max;
        this.kernel = kernel;
        this.stride = stride;
    }

    /** Max pooling over {@code kernel x kernel} windows moved by {@code stride}. */
    public static Pool2d max(String name, int kernel, int stride) {
        return new Pool2d(name, true, kernel, stride);
    }

    /** Average pooling over {@code kernel x kernel} windows moved by {@code stride}. */
    public static Pool2d average(String name, int kernel, int stride) {
        return new Pool2d(name, false, kernel, stride);
    }

    @Override
    public String name() {
        return name;
    }

    /** Whether this is max pooling (else average pooling). */
    public boolean isMax() {
        return max;
    }

    /** The window size. */
    public int kernel() {
        return kernel;
    }

    /** The step between windows. */
    public int stride() {
        return stride;
    }

    /** The output shape for an input {@code [N, C, H, W]}, or an error naming the layer. */
    public int[] outputShape(int[] in) {
        if (in.length != 4 || in[2] < kernel || in[3] < kernel) {
            throw new IllegalArgumentException(name + ": input shape " + Arrays.toString(in) + " does not fit "
                    + kernel + "x" + kernel + " pooling (expected [N, C, H, W] with H, W >= " + kernel + ")");
        }
        return new int[] {in[0], in[1], (in[2] - kernel) / stride + 1, (in[3] - kernel) / stride + 1};
    }

    /** Pools {@code x}; for max pooling records the winning input index per output in {@code argmax} if not null. */
    private float[] pool(float[] x, int[] in, int[] out, int[] argmax) {
        int planes = in[0] * in[1];
        int h = in[2];
        int w = in[3];
        int oh = out[2];
        int ow = out[3];
        float[] y = new float[planes * oh * ow];
        if (max && argmax == null) {
            maxOnly(x, planes, h, w, oh, ow, y);
            return y;
        }
        float inv = 1f / (kernel * kernel);
        for (int pl = 0; pl < planes; pl++) {
            for (int i = 0; i < oh; i++) {
                for (int j = 0; j < ow; j++) {
                    float acc = max ? Float.NEGATIVE_INFINITY : 0f;
                    int best = -1;
                    for (int u = 0; u < kernel; u++) {
                        int row = (pl * h + i * stride + u) * w + j * stride;
                        for (int v = 0; v < kernel; v++) {
                            float xv = x[row + v];
                            if (!max) {
                                acc += xv;
                            } else if (xv > acc || best < 0) {
                                acc = xv;
                                best = row + v;
                            }
                        }
                    }
                    int o = (pl * oh + i) * ow + j;
                    y[o] = max ? acc : acc * inv;
                    if (argmax != null) {
                        argmax[o] = best;
                    }
                }
            }
        }
        return y;
    }

    /**
     * {@link #pool} for max pooling without the winners: the same values (each window's first element, then every
     * larger one), with a conditional move rather than a branch per element (on real activations the comparison goes
     * either way and a branch is mispredicted about half the time).
     */
    private void maxOnly(float[] x, int planes, int h, int w, int oh, int ow, float[] y) {
        for (int pl = 0; pl < planes; pl++) {
            for (int i = 0; i < oh; i++) {
                int o = (pl * oh + i) * ow;
                int top = (pl * h + i * stride) * w;
                if (kernel == 2) { // the common window, written out: four loads and three moves per output
                    for (int j = 0; j < ow; j++) {
                        int c = top + j * stride;
                        float acc = x[c];
                        float b = x[c + 1];
                        acc = b > acc ? b : acc;
                        b = x[c + w];
                        acc = b > acc ? b : acc;
                        b = x[c + w + 1];
                        y[o + j] = b > acc ? b : acc;
                    }
                    continue;
                }
                for (int j = 0; j < ow; j++) {
                    int corner = top + j * stride;
                    float acc = x[corner];
                    for (int u = 0; u < kernel; u++) {
                        int row = corner + u * w;
                        for (int v = 0; v < kernel; v++) {
                            float xv = x[row + v];
                            acc = xv > acc ? xv : acc;
                        }
                    }
                    y[o + j] = acc;
                }
            }
        }
    }

    @Override
    public Tensor forward(Tensor batch) {
        int[] os = outputShape(batch.shape());
        return TensorAccess.wrap(pool(TensorAccess.data(batch), batch.shape(), os, null), os, DType.F32, null);
    }

    Node node() {
        return new Node.ParameterFree(this) {
            private int[] in;
            private int[] out;
            private int[] argmax;

            @Override
            Act forward(Act a, boolean training) {
                in = a.shape();
                out = outputShape(in);
                argmax = max ? new int[out[0] * out[1] * out[2] * out[3]] : null;
                return new Act(pool(a.v(), in, out, argmax), out);
            }

            @Override
            Act backward(Act gy, boolean needInput) {
                float[] g = gy.v();
                float[] gx = new float[in[0] * in[1] * in[2] * in[3]];
                if (max) {
                    for (int o = 0; o < g.length; o++) {
                        gx[argmax[o]] += g[o];
                    }
                    return new Act(gx, in);
                }
                float inv = 1f / (kernel * kernel);
                int planes = in[0] * in[1];
                for (int pl = 0; pl < planes; pl++) {
                    for (int i = 0; i < out[2]; i++) {
                        for (int j = 0; j < out[3]; j++) {
                            float share = g[(pl * out[2] + i) * out[3] + j] * inv;
                            for (int u = 0; u < kernel; u++) {
                                int row = (pl * in[2] + i * stride + u) * in[3] + j * stride;
                                for (int v = 0; v < kernel; v++) {
                                    gx[row + v] += share;
                                }
                            }
                        }
                    }
                }
                return new Act(gx, in);
            }
        };
    }

    @Override
    public String toString() {
        return (max ? "MaxPool " : "AvgPool ") + name + " " + kernel + "x" + kernel + ", stride " + stride;
    }
}
