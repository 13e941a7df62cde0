package dev.rungbook.nn;

import dev.rungbook.internal.ForwardKernels;
import dev.rungbook.internal.TensorAccess;
import dev.rungbook.tensor.DType;
import dev.rungbook.tensor.Tensor;
import java.util.Arrays;

/**
 * A fully connected layer {@code y = x W^T + b} with weight shaped {@code [out, in]} (the usual checkpoint layout) and
 * bias shaped {@code [out]}.
 */
public final class Linear implements WeightedLayer {
    private final String name;
    private final Tensor weight;
    private final Tensor bias;
    /** The weight and bias packed for the forward kernel, made on first use (layers are immutable). */
    private volatile ForwardKernels.FloatPanels panels;

    /**
     * @param name the layer's name (checkpoint tensors are {@code name + ".weight"} and {@code name + ".bias"})
     * @param weight shaped [out, in]
     * @param bias shaped [out]
     * @throws IllegalArgumentException if the shapes do not fit
     */
    public Linear(String name, Tensor weight, Tensor bias) {
        if (weight.rank() != 2) {
            throw new IllegalArgumentException(name + ": weight must be [out, in], got "
                    + Arrays.toString(weight.shape()));
        }
        if (bias.rank() != 1 || bias.dim(0) != weight.dim(0)) {
            throw new IllegalArgumentException(name + ": bias shape " + Arrays.toString(bias.shape())
                    + " does not fit weight shape " + Arrays.toString(weight.shape()));
        }
        this.name = name;
        this.weight = weight;
        this.bias = bias;
    }

    /**
     * A freshly initialised layer: weights drawn from N(0, 2 / in) (He initialisation, common practice before ReLU)
     * with a seeded generator, biases zero.
     */
    public static Linear initial(String name, int in, int out, long seed) {
        float[] w = heNormal(new java.util.Random(seed), out * in, in);
        return new Linear(name, Tensor.of(w, out, in), Tensor.of(new float[out], out));
    }

    /** {@code n} values drawn in order from N(0, 2 / fanIn) (He initialisation) with {@code r}. */
    static float[] heNormal(java.util.Random r, int n, int fanIn) {
        float[] w = new float[n];
        double sd = Math.sqrt(2.0 / fanIn);
        for (int i = 0; i < n; i++) {
            w[i] = (float) (r.nextGaussian() * sd);
        }
        return w;
    }

    @Override
    public String name() {
        return name;
    }

    /** The weight, shaped [out, in]. */
    @Override
    public Tensor weight() {
        return weight;
    }

    /** The bias, shaped [out]. */
    @Override
    public Tensor bias() {
        return bias;
    }

    /** Input features. */
    public int inFeatures() {
        return weight.dim(1);
    }

    /** Output features. */
    public int outFeatures() {
        return weight.dim(0);
    }

    /** The same layer with another weight of the same shape (for example a dequantized one). */
    @Override
    public Linear withWeight(Tensor newWeight) {
        if (!Arrays.equals(newWeight.shape(), weight.shape())) {
            throw new IllegalArgumentException(name + ": new weight shape " + Arrays.toString(newWeight.shape())
                    + " differs from " + Arrays.toString(weight.shape()));
        }
        return new Linear(name, newWeight, bias);
    }

    /** The same layer with another bias of the same shape. */
    @Override
    public Linear withBias(Tensor newBias) {
        return new Linear(name, weight, newBias);
    }

    @Override
    public Tensor forward(Tensor batch) {
        int out = outFeatures();
        checkInput(batch.shape());
        int n = batch.dim(0);
        float[] x = TensorAccess.data(batch);
        // Both give the same bits; the packed kernel is the faster one only on the Vector API.
        float[] y = ForwardKernels.vectorised() ? panels().affine(x, n)
                : affine(x, n, TensorAccess.data(weight), TensorAccess.data(bias), inFeatures(), out);
        return TensorAccess.wrap(y, new int[] {n, out}, DType.F32, null);
    }

    /**
     * {@code forward} followed by a ReLU ({@link Relu#forward}, {@code Math.max(0, y)}) in one pass: the same values,
     * without the intermediate array.
     */
    Tensor forwardRelu(Tensor batch) {
        if (!ForwardKernels.vectorised()) {
            float[] y = TensorAccess.data(forward(batch));
            for (int i = 0; i < y.length; i++) {
                y[i] = Math.max(0f, y[i]);
            }
            return TensorAccess.wrap(y, new int[] {batch.dim(0), outFeatures()}, DType.F32, null);
        }
        checkInput(batch.shape());
        int n = batch.dim(0);
        float[] y = panels().affineRelu(TensorAccess.data(batch), n);
        return TensorAccess.wrap(y, new int[] {n, outFeatures()}, DType.F32, null);
    }

    /**
     * The packed weight. Each output is summed from its bias over the inputs in increasing order with one fused
     * multiply-add per step, as {@link Dense#affine} does, so the two give the same bits.
     */
    private ForwardKernels.FloatPanels panels() {
        ForwardKernels.FloatPanels p = panels;
        if (p == null) {
            p = ForwardKernels.FloatPanels.of(TensorAccess.data(weight), TensorAccess.data(bias), outFeatures(),
                    inFeatures());
            panels = p;
        }
        return p;
    }

    private void checkInput(int[] shape) {
        if (shape.length != 2 || shape[1] != inFeatures()) {
            throw new IllegalArgumentException(name + ": input shape " + Arrays.toString(shape)
                    + " does not fit weight shape " + Arrays.toString(weight.shape()) + " (expected [N, "
                    + inFeatures() + "])");
        }
    }

    /** {@code y[n x out] = x[n x in] w[out x in]^T + b}, as a new array. */
    static float[] affine(float[] x, int n, float[] w, float[] b, int in, int out) {
        float[] y = new float[n * out];
        Dense.affine(x, w, b, y, n, in, out);
        return y;
    }

    /** The training node: gradients {@code dW = gy^T x}, {@code db = sum gy}, {@code dx = gy W}. */
    Node node(WeightTransform transform) {
        int in = inFeatures();
        int out = outFeatures();
        return new WeightedNode(this, transform) {
            private float[] x;

            @Override
            Act forward(Act a, float[] w, boolean training) {
                checkInput(a.shape());
                x = a.v();
                return new Act(affine(x, a.batch(), w, bias.value, in, out), new int[] {a.batch(), out});
            }

            @Override
            Act backward(Act gy, float[] w, float[] gw, boolean needInput) {
                int n = gy.batch();
                Dense.addMatmulTransposedA(gy.v(), x, gw, n, out, in);
                addBiasGradient(gy.v(), n, out, 1);
                if (!needInput) {
                    return null;
                }
                float[] gx = new float[n * in];
                Dense.matmul(gy.v(), w, gx, n, out, in);
                return new Act(gx, new int[] {n, in});
            }
        };
    }

    @Override
    public String toString() {
        return "Linear " + name + " " + inFeatures() + " -> " + outFeatures();
    }
}
