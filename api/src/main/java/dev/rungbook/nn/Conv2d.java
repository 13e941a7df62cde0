package dev.rungbook.nn;

import dev.rungbook.internal.ForwardKernels;
import dev.rungbook.internal.TensorAccess;
import dev.rungbook.tensor.DType;
import dev.rungbook.tensor.Tensor;
import java.util.Arrays;
import java.util.Random;

/**
 * A 2-D convolution (cross-correlation, as in every deep-learning framework) on batches shaped {@code [N, C, H, W]}
 * (NCHW): {@code y[n, o, i, j] = b[o] + sum_{c, u, v} w[o, c, u, v] x[n, c, i*stride + u - pad, j*stride + v - pad]},
 * with zeros outside the input. Weight shaped {@code [out, in, kh, kw]} (axis 0 the output channel, as for
 * {@link Linear}), bias {@code [out]}. The output is {@code [N, out, (H + 2 pad - kh) / stride + 1, ...]}.
 *
 * <p>The forward pass lays each sample's receptive fields out as rows ("im2col", {@code [P, in*kh*kw]} with
 * {@code P} output positions) and multiplies them by the weight seen as a {@code [out, in*kh*kw]} matrix, which gives
 * the output directly in NCHW order.
 */
public final class Conv2d implements WeightedLayer {
    private final String name;
    private final Tensor weight;
    private final Tensor bias;
    private final int stride;
    private final int padding;

    /**
     * @param name the layer's name (checkpoint tensors {@code name + ".weight"}, {@code name + ".bias"})
     * @param weight shaped [out, in, kh, kw]
     * @param bias shaped [out]
     * @param stride step between receptive fields, at least 1
     * @param padding zeros added on each side of both spatial axes, at least 0
     * @throws IllegalArgumentException naming the layer if the shapes or numbers do not fit
     */
    public Conv2d(String name, Tensor weight, Tensor bias, int stride, int padding) {
        if (weight.rank() != 4) {
            throw new IllegalArgumentException(name + ": convolution weight must be [out, in, kh, kw], got "
                    + Arrays.toString(weight.shape()));
        }
        if (bias.rank() != 1 || bias.dim(0) != weight.dim(0)) {
            throw new IllegalArgumentException(name + ": bias shape " + Arrays.toString(bias.shape())
                    + " does not fit weight shape " + Arrays.toString(weight.shape()));
        }
        if (stride < 1 || padding < 0) {
            throw new IllegalArgumentException(name + ": stride must be at least 1 and padding at least 0, got stride "
                    + stride + ", padding " + padding);
        }
        this.name = name;
        this.weight = weight;
        this.bias = bias;
        this.stride = stride;
        this.padding = padding;
    }

    /** A convolution with stride 1 and no padding. */
    public Conv2d(String name, Tensor weight, Tensor bias) {
        this(name, weight, bias, 1, 0);
    }

    /**
     * A freshly initialised square convolution: weights drawn from N(0, 2 / (in k k)) (He initialisation, common
     * practice before ReLU) with a seeded generator, biases zero.
     */
    public static Conv2d initial(String name, int in, int out, int kernel, int stride, int padding, long seed) {
        float[] w = Linear.heNormal(new Random(seed), out * in * kernel * kernel, in * kernel * kernel);
        return new Conv2d(name, Tensor.of(w, out, in, kernel, kernel), Tensor.of(new float[out], out), stride,
                padding);
    }

    @Override
    public String name() {
        return name;
    }

    /** The weight, shaped [out, in, kh, kw]. */
    @Override
    public Tensor weight() {
        return weight;
    }

    /** The bias, shaped [out]. */
    @Override
    public Tensor bias() {
        return bias;
    }

    /** Output channels. */
    public int outChannels() {
        return weight.dim(0);
    }

    /** Input channels. */
    public int inChannels() {
        return weight.dim(1);
    }

    /** Kernel height. */
    public int kernelHeight() {
        return weight.dim(2);
    }

    /** Kernel width. */
    public int kernelWidth() {
        return weight.dim(3);
    }

    /** The stride on both spatial axes. */
    public int stride() {
        return stride;
    }

    /** The zero padding on each side of both spatial axes. */
    public int padding() {
        return padding;
    }

    @Override
    public Conv2d withWeight(Tensor newWeight) {
        if (!Arrays.equals(newWeight.shape(), weight.shape())) {
            throw new IllegalArgumentException(name + ": new weight shape " + Arrays.toString(newWeight.shape())
                    + " differs from " + Arrays.toString(weight.shape()));
        }
        return new Conv2d(name, newWeight, bias, stride, padding);
    }

    @Override
    public Conv2d withBias(Tensor newBias) {
        return new Conv2d(name, weight, newBias, stride, padding);
    }

    /** The output shape for an input shaped {@code [N, C, H, W]}, or an error naming the layer. */
    public int[] outputShape(int[] input) {
        if (input.length != 4 || input[1] != inChannels()) {
            throw new IllegalArgumentException(name + ": input shape " + Arrays.toString(input)
                    + " does not fit weight shape " + Arrays.toString(weight.shape()) + " (expected [N, "
                    + inChannels() + ", H, W])");
        }
        int oh = (input[2] + 2 * padding - kernelHeight()) / stride + 1;
        int ow = (input[3] + 2 * padding - kernelWidth()) / stride + 1;
        if (input[2] + 2 * padding < kernelHeight() || input[3] + 2 * padding < kernelWidth()) {
            throw new IllegalArgumentException(name + ": input " + input[2] + "x" + input[3] + " with padding "
                    + padding + " is smaller than the kernel " + kernelHeight() + "x" + kernelWidth());
        }
        return new int[] {input[0], outChannels(), oh, ow};
    }

    @Override
    public Tensor forward(Tensor batch) {
        int[] os = outputShape(batch.shape());
        float[] x = TensorAccess.data(batch);
        float[] y = ForwardKernels.vectorised() ? forwardTapMajor(x, batch.shape(), os)
                : forward(x, batch.shape(), os, TensorAccess.data(weight), TensorAccess.data(bias), null);
        return TensorAccess.wrap(y, os, DType.F32, null);
    }

    /**
     * The forward pass with the receptive fields laid out tap-major ({@code [in*kh*kw, P]}, positions contiguous)
     * and {@link ForwardKernels#convPositions} running over positions on the Vector API. Each output is summed in
     * the order of the dot-product kernel of {@link #forward(float[], int[], int[], float[], float[], float[][])},
     * so the two give the same bits.
     */
    private float[] forwardTapMajor(float[] x, int[] is, int[] os) {
        int n = is[0];
        int out = os[1];
        int p = os[2] * os[3];
        int k = inChannels() * kernelHeight() * kernelWidth();
        float[] w = TensorAccess.data(weight);
        float[] b = TensorAccess.data(bias);
        float[] y = new float[n * out * p];
        float[] col = new float[k * p];
        for (int s = 0; s < n; s++) {
            tapMajor(x, s, is, os, col);
            ForwardKernels.convPositions(w, out, k, col, p, b, y, s * out * p);
        }
        return y;
    }

    /** Sample {@code s}'s receptive fields as {@code col[(c, u, v), q]} (zero where padded), positions contiguous. */
    private void tapMajor(float[] x, int s, int[] is, int[] os, float[] col) {
        int c = is[1];
        int h = is[2];
        int wd = is[3];
        int kh = kernelHeight();
        int kw = kernelWidth();
        int oh = os[2];
        int ow = os[3];
        int p = oh * ow;
        int t = 0;
        for (int ch = 0; ch < c; ch++) {
            int plane = (s * c + ch) * h;
            for (int u = 0; u < kh; u++) {
                for (int v = 0; v < kw; v++, t++) {
                    int row = t * p;
                    // output columns j whose input column j*stride + v - padding lies inside [0, wd)
                    int jlo = Math.max(0, (padding - v + stride - 1) / stride);
                    int jhi = Math.min(ow, Math.floorDiv(wd - 1 + padding - v, stride) + 1);
                    for (int i = 0; i < oh; i++) {
                        int yi = i * stride + u - padding;
                        int at = row + i * ow;
                        if (yi < 0 || yi >= h || jlo >= jhi) {
                            java.util.Arrays.fill(col, at, at + ow, 0f);
                            continue;
                        }
                        for (int j = 0; j < jlo; j++) { // the padded edges: a column or two, a loop beats a call
                            col[at + j] = 0f;
                        }
                        int src = (plane + yi) * wd + jlo * stride + v - padding;
                        if (stride == 1) {
                            System.arraycopy(x, src, col, at + jlo, jhi - jlo);
                        } else {
                            for (int j = jlo; j < jhi; j++, src += stride) {
                                col[at + j] = x[src];
                            }
                        }
                        for (int j = jhi; j < ow; j++) {
                            col[at + j] = 0f;
                        }
                    }
                }
            }
        }
    }

    /** The forward pass on raw arrays; keeps each sample's im2col matrix in {@code cols} when it is not null. */
    private float[] forward(float[] x, int[] is, int[] os, float[] w, float[] b, float[][] cols) {
        int n = is[0];
        int out = os[1];
        int p = os[2] * os[3];
        int k = inChannels() * kernelHeight() * kernelWidth();
        float[] y = new float[n * out * p];
        float[] col = null;
        float[] ys = new float[out * p];
        for (int s = 0; s < n; s++) {
            if (cols != null) {
                cols[s] = new float[p * k];
                col = cols[s];
            } else if (col == null) {
                col = new float[p * k];
            }
            im2col(x, s, is, os, col, false);
            Dense.matmulTransposedB(w, col, ys, out, k, p);
            int base = s * out * p;
            for (int o = 0; o < out; o++) {
                float bo = b[o];
                for (int q = 0; q < p; q++) {
                    y[base + o * p + q] = ys[o * p + q] + bo;
                }
            }
        }
        return y;
    }

    /**
     * The receptive fields of {@code batch} as rows: {@code [N * P, in * kh * kw]}, sample after sample, output
     * positions in row-major order within a sample, taps ordered {@code (c, u, v)} like the weight's last three axes
     * (zeros where padded). Row {@code n P + q} times the weight seen as {@code [out, in * kh * kw]} plus the bias is
     * the output of sample n at position q.
     */
    Tensor im2colRows(Tensor batch) {
        int[] is = batch.shape();
        int[] os = outputShape(is);
        int p = os[2] * os[3];
        int k = inChannels() * kernelHeight() * kernelWidth();
        float[] x = TensorAccess.data(batch);
        float[] rows = new float[is[0] * p * k];
        float[] col = new float[p * k];
        for (int s = 0; s < is[0]; s++) {
            im2col(x, s, is, os, col, false);
            System.arraycopy(col, 0, rows, s * p * k, p * k);
        }
        return TensorAccess.wrap(rows, new int[] {is[0] * p, k}, DType.F32, null);
    }

    /**
     * Writes sample {@code s}'s receptive fields of {@code x} as rows {@code col[q, (c, u, v)]} (zero where padded);
     * with {@code adjoint} instead adds the rows of {@code col} back onto sample {@code s} of {@code x} (col2im, the
     * transpose, for the input gradient).
     */
    private void im2col(float[] x, int s, int[] is, int[] os, float[] col, boolean adjoint) {
        int c = is[1];
        int h = is[2];
        int wd = is[3];
        int kh = kernelHeight();
        int kw = kernelWidth();
        int k = c * kh * kw;
        for (int i = 0; i < os[2]; i++) {
            for (int j = 0; j < os[3]; j++) {
                int row = (i * os[3] + j) * k;
                int t = 0;
                for (int ch = 0; ch < c; ch++) {
                    int plane = (s * c + ch) * h;
                    for (int u = 0; u < kh; u++) {
                        int yi = i * stride + u - padding;
                        for (int v = 0; v < kw; v++, t++) {
                            int xj = j * stride + v - padding;
                            boolean inside = yi >= 0 && yi < h && xj >= 0 && xj < wd;
                            if (adjoint) {
                                if (inside) {
                                    x[(plane + yi) * wd + xj] += col[row + t];
                                }
                            } else {
                                col[row + t] = inside ? x[(plane + yi) * wd + xj] : 0f;
                            }
                        }
                    }
                }
            }
        }
    }

    /**
     * The training node. With {@code cols} the im2col rows of a sample and {@code gy} its output gradient as
     * {@code [out, P]}: {@code dW += gy cols}, {@code db += sum_P gy}, {@code dcols = gy^T W}, folded back by col2im.
     */
    Node node(WeightTransform transform) {
        int out = outChannels();
        int k = inChannels() * kernelHeight() * kernelWidth();
        return new WeightedNode(this, transform) {
            private float[][] cols;
            private int[] is;
            private int[] os;

            @Override
            Act forward(Act a, float[] w, boolean training) {
                is = a.shape();
                os = outputShape(is);
                cols = new float[is[0]][];
                return new Act(Conv2d.this.forward(a.v(), is, os, w, bias.value, cols), os);
            }

            @Override
            Act backward(Act gy, float[] w, float[] gw, boolean needInput) {
                int n = is[0];
                int p = os[2] * os[3];
                float[] g = gy.v();
                float[] gs = new float[out * p];
                float[] gcol = new float[p * k];
                float[] gx = needInput ? new float[is[0] * is[1] * is[2] * is[3]] : null;
                for (int s = 0; s < n; s++) {
                    System.arraycopy(g, s * out * p, gs, 0, out * p);
                    Dense.addMatmul(gs, cols[s], gw, out, p, k);
                    if (needInput) {
                        Arrays.fill(gcol, 0f);
                        Dense.addMatmulTransposedA(gs, w, gcol, out, p, k);
                        im2col(gx, s, is, os, gcol, true);
                    }
                }
                addBiasGradient(g, n, out, p);
                return needInput ? new Act(gx, is) : null;
            }
        };
    }

    @Override
    public String toString() {
        return "Conv2d " + name + " " + inChannels() + " -> " + outChannels() + ", kernel " + kernelHeight() + "x"
                + kernelWidth() + ", stride " + stride + ", padding " + padding;
    }
}
