package dev.rungbook.nn;

import dev.rungbook.internal.TensorAccess;
import dev.rungbook.tensor.Tensor;
import java.util.ArrayList;
import java.util.Arrays;
import java.util.HashMap;
import java.util.List;
import java.util.Map;
import org.apache.commons.math3.analysis.integration.SimpsonIntegrator;
import org.apache.commons.math3.distribution.NormalDistribution;

/**
 * Bias correction (Nagel et al., ICCV 2019): quantizing a weight W to W~ shifts the layer's expected output by
 * {@code (W~ - W) E[x]}; subtracting that from the bias brings the mean output error per channel back to about zero.
 *
 * <p>{@link #empirical} estimates {@code E[x]} per layer from calibration inputs run through the quantized network
 * up to that layer (so that corrections of earlier layers are taken into account). {@link #expectedReluOfNormal}
 * gives the analytic {@code E[x]} when the input of a ReLU is normal with known mean and standard deviation, as
 * after a BatchNorm layer with shift beta and scale gamma; {@link #analytic} corrects a whole network from its batch
 * norms that way. Both handle linear and convolution layers.
 */
public final class BiasCorrection {
    private static final NormalDistribution STANDARD = new NormalDistribution(null, 0, 1);

    private BiasCorrection() {
    }

    /**
     * {@code E[max(0, z)]} for {@code z ~ N(beta, gamma^2)}: {@code gamma phi(beta/gamma) + beta Phi(beta/gamma)},
     * where phi and Phi are the standard normal density and distribution function (the same as
     * {@code gamma phi(-beta/gamma) + beta (1 - Phi(-beta/gamma))}).
     *
     * @throws IllegalArgumentException if {@code gamma} is negative or either argument is not finite
     */
    public static double expectedReluOfNormal(double beta, double gamma) {
        if (!Double.isFinite(beta) || !Double.isFinite(gamma) || gamma < 0) {
            throw new IllegalArgumentException("need finite beta and gamma >= 0, got beta " + beta + ", gamma "
                    + gamma);
        }
        if (gamma == 0) {
            return Math.max(0, beta);
        }
        double t = beta / gamma;
        return gamma * STANDARD.density(t) + beta * STANDARD.cumulativeProbability(t);
    }

    /**
     * {@code E[max(0, z_1, ..., z_m)]} for independent {@code z_k ~ N(beta, gamma^2)}: the expected output of a max
     * pooling window of {@code m} values after a ReLU, if the values of a window were independent. Computed as
     * {@code integral_0^inf (1 - Phi((t - beta) / gamma)^m) dt} (Simpson's rule, commons-math3). For {@code m = 1}
     * it is {@link #expectedReluOfNormal}. Neighbouring activations of an image are positively correlated, which
     * makes the true expectation smaller: it lies between {@code expectedReluOfNormal(beta, gamma)} (fully
     * correlated) and this value.
     *
     * @throws IllegalArgumentException if {@code m < 1}, {@code gamma} is negative or an argument is not finite
     */
    public static double expectedReluOfMaxOfNormals(double beta, double gamma, int m) {
        if (m < 1) {
            throw new IllegalArgumentException("need a window of at least one value, got " + m);
        }
        double single = expectedReluOfNormal(beta, gamma);
        if (m == 1 || gamma == 0) {
            return single;
        }
        double upper = Math.max(0, beta) + 12 * gamma;
        SimpsonIntegrator simpson = new SimpsonIntegrator(1e-12, 1e-10, 3, 30);
        return simpson.integrate(10_000_000, t -> 1 - Math.pow(STANDARD.cumulativeProbability((t - beta) / gamma), m),
                0, upper);
    }

    /** {@link #analytic(Network, Network, int[], double[])} without an input mean: the first layer keeps its bias. */
    public static Network analytic(Network reference, Network quantized, int... inputShape) {
        return analytic(reference, quantized, inputShape, null);
    }

    /**
     * Analytic ("data-free") bias correction from batch-norm statistics. {@code reference} is the float network with
     * its batch norms unfolded; {@code quantized} has the weighted layers of {@code reference.foldBatchNorm()} (same
     * names and shapes, in order) with quantized weights. For each weighted layer whose input comes from
     * {@code BatchNorm -> ReLU} (possibly followed by pooling, identity and flatten), the expected input of channel c
     * is {@code E[relu(N(beta_c, gamma_c^2))]} ({@link #expectedReluOfNormal}, {@code |gamma_c|}). Average pooling
     * leaves it unchanged exactly. Max pooling is taken to leave it unchanged too, as if the values of a window were
     * equal (fully correlated): a lower bound of the true expectation. On the sample thermal conv net neighbouring
     * activations are strongly correlated; this choice made the analytic correction agree with the empirical one,
     * while the independent-window upper bound ({@link #expectedReluOfMaxOfNormals}) overestimated the pooled means
     * by 1.2 to 2.5 times and over-corrected. The bias becomes {@code b - (W~ - W) E[x]} with W the folded float
     * weight.
     *
     * <p>Convolutions: {@code E[x]} of input channel c enters every tap {@code (c, u, v)} of the kernel window, times
     * the share of output positions at which that tap lies inside the input (padded zeros contribute nothing), so the
     * correction is exact for the mean over all output positions when the input's mean is the same at every
     * position; the shapes come from {@code inputShape} (one sample, without the batch axis). A linear layer after a
     * flatten of {@code [C, H, W]} gives each channel's {@code E[x]} to its block of {@code H W} features.
     *
     * <p>The first layer sees the network input: it is corrected only if {@code inputMean} (one value per input
     * channel or feature, e.g. the data's mean pixel) is given. Layers whose input is not preceded by a batch norm
     * and ReLU keep their bias. Equalized networks are not supported (their batch-norm statistics would have to be
     * rescaled too).
     *
     * @throws IllegalArgumentException if the networks do not match or the input shape does not fit
     */
    public static Network analytic(Network reference, Network quantized, int[] inputShape, double[] inputMean) {
        Network folded = reference.foldBatchNorm();
        List<WeightedLayer> floats = folded.weightedLayers();
        List<WeightedLayer> qs = quantized.weightedLayers();
        if (floats.size() != qs.size()) {
            throw new IllegalArgumentException("bias correction: the folded reference has " + floats.size()
                    + " weighted layers, the quantized network " + qs.size());
        }
        Map<String, int[]> inputShapes = inputShapes(folded, inputShape);
        Map<String, Tensor> biases = new HashMap<>();
        List<Layer> ref = reference.layers();
        int w = 0;
        for (int k = 0; k < ref.size(); k++) {
            if (!(ref.get(k) instanceof WeightedLayer)) {
                continue;
            }
            WeightedLayer f = floats.get(w);
            WeightedLayer q = qs.get(w++);
            if (!f.name().equals(q.name()) || !Arrays.equals(f.weight().shape(), q.weight().shape())) {
                throw new IllegalArgumentException("bias correction: weighted layer " + f.name() + " "
                        + Arrays.toString(f.weight().shape()) + " of the reference meets " + q.name() + " "
                        + Arrays.toString(q.weight().shape()) + " in the quantized network");
            }
            double[] e = expectedInput(ref, k, inputMean);
            if (e == null) {
                continue;
            }
            biases.put(q.name(), corrected(f, q, tapMeans(q, e, inputShapes.get(q.name()))));
        }
        return quantized.mapWeighted(l -> biases.containsKey(l.name()) ? l.withBias(biases.get(l.name())) : l);
    }

    /** The input shape (with batch 1) of each weighted layer, from a zero sample run through {@code net}. */
    private static Map<String, int[]> inputShapes(Network net, int[] inputShape) {
        int[] s = new int[inputShape.length + 1];
        s[0] = 1;
        System.arraycopy(inputShape, 0, s, 1, inputShape.length);
        int n = 1;
        for (int d : s) {
            n *= d;
        }
        Tensor x = Tensor.of(new float[n], s);
        Map<String, int[]> out = new HashMap<>();
        for (Layer l : net.layers()) {
            if (l instanceof WeightedLayer) {
                out.put(l.name(), x.shape());
            }
            x = l.forward(x);
        }
        return out;
    }

    /**
     * {@code E[x]} per channel of the input of layer {@code k} of {@code layers} from the batch norm before it, or
     * null if there is none.
     */
    private static double[] expectedInput(List<Layer> layers, int k, double[] inputMean) {
        int j = k - 1;
        while (j >= 0 && (layers.get(j) instanceof Flatten || layers.get(j) instanceof Identity
                || layers.get(j) instanceof Pool2d)) {
            j--;
        }
        if (j < 0) {
            return inputMean == null ? null : inputMean.clone();
        }
        if (!(layers.get(j) instanceof Relu) || j == 0 || !(layers.get(j - 1) instanceof BatchNorm)) {
            return null;
        }
        BatchNorm bn = (BatchNorm) layers.get(j - 1);
        double[] e = new double[bn.channels()];
        for (int c = 0; c < e.length; c++) {
            e[c] = expectedReluOfNormal(bn.beta().getFlat(c), Math.abs(bn.gamma().getFlat(c)));
        }
        return e;
    }

    /**
     * The mean value of each weight tap's input over the output positions, from {@code E[x]} per input channel:
     * for a convolution {@code E[x_c]} times the share of output positions where tap {@code (u, v)} is inside the
     * input; for a linear layer {@code E[x_c]} on each of channel c's block of features.
     */
    private static double[] tapMeans(WeightedLayer layer, double[] e, int[] inShape) {
        if (layer instanceof Conv2d) {
            Conv2d c = (Conv2d) layer;
            if (e.length != c.inChannels()) {
                throw new IllegalArgumentException(c.name() + ": " + e.length + " input means for "
                        + c.inChannels() + " channels");
            }
            int[] os = c.outputShape(inShape);
            double[] fu = insideShare(c.kernelHeight(), os[2], inShape[2], c.stride(), c.padding());
            double[] fv = insideShare(c.kernelWidth(), os[3], inShape[3], c.stride(), c.padding());
            double[] m = new double[c.inChannels() * fu.length * fv.length];
            int t = 0;
            for (int ch = 0; ch < c.inChannels(); ch++) {
                for (double a : fu) {
                    for (double b : fv) {
                        m[t++] = e[ch] * a * b;
                    }
                }
            }
            return m;
        }
        int in = layer.weight().dim(1);
        if (in % e.length != 0) {
            throw new IllegalArgumentException(layer.name() + ": " + e.length + " input means do not divide "
                    + in + " features");
        }
        int block = in / e.length;
        double[] m = new double[in];
        for (int j = 0; j < in; j++) {
            m[j] = e[j / block];
        }
        return m;
    }

    /** For each kernel offset u, the share of the {@code outSize} output positions whose tap u is inside the input. */
    private static double[] insideShare(int kernel, int outSize, int inSize, int stride, int padding) {
        double[] f = new double[kernel];
        for (int u = 0; u < kernel; u++) {
            int inside = 0;
            for (int i = 0; i < outSize; i++) {
                int y = i * stride + u - padding;
                if (y >= 0 && y < inSize) {
                    inside++;
                }
            }
            f[u] = inside / (double) outSize;
        }
        return f;
    }

    /**
     * Corrects the biases of {@code quantized} (a network whose weighted layers hold quantized-and-dequantized
     * weights of {@code reference}, layer for layer) from calibration inputs: layer by layer, {@code E[x]} is the
     * mean of the layer's input in the corrected quantized network (for a convolution the mean of each tap's input
     * over samples and output positions, padded zeros included), and {@code b <- b - (W~ - W) E[x]}.
     *
     * @throws IllegalArgumentException if the two networks do not have the same structure
     */
    public static Network empirical(Network reference, Network quantized, Tensor calibrationInputs) {
        List<Layer> ref = reference.layers();
        List<Layer> q = quantized.layers();
        if (ref.size() != q.size()) {
            throw new IllegalArgumentException("networks differ in depth: " + ref.size() + " and " + q.size()
                    + " layers");
        }
        List<Layer> out = new ArrayList<>();
        Tensor x = calibrationInputs;
        for (int i = 0; i < q.size(); i++) {
            Layer layer = q.get(i);
            if (layer instanceof WeightedLayer) {
                if (!(ref.get(i) instanceof WeightedLayer) || ref.get(i).getClass() != layer.getClass()
                        || !Arrays.equals(((WeightedLayer) ref.get(i)).weight().shape(),
                                ((WeightedLayer) layer).weight().shape())) {
                    throw new IllegalArgumentException("layer " + i + " (" + layer.name()
                            + ") is not the same kind of weighted layer in both networks");
                }
                WeightedLayer lq = (WeightedLayer) layer;
                WeightedLayer lr = (WeightedLayer) ref.get(i);
                double[] m = lq instanceof Conv2d ? meanTaps((Conv2d) lq, x)
                        : meanOverBatch(x, lq.weight().dim(1), lq.name());
                layer = lq.withBias(corrected(lr, lq, m));
            }
            out.add(layer);
            x = layer.forward(x);
        }
        return Network.of(out);
    }

    /** The mean of each im2col column (tap {@code (c, u, v)}) of {@code x} over samples and output positions. */
    private static double[] meanTaps(Conv2d c, Tensor x) {
        int[] os = c.outputShape(x.shape());
        int n = x.dim(0);
        int ch = x.dim(1);
        int h = x.dim(2);
        int wd = x.dim(3);
        int kh = c.kernelHeight();
        int kw = c.kernelWidth();
        float[] v = TensorAccess.data(x);
        double[] m = new double[ch * kh * kw];
        for (int s = 0; s < n; s++) {
            for (int k = 0; k < ch; k++) {
                int plane = (s * ch + k) * h;
                for (int u = 0; u < kh; u++) {
                    for (int t = 0; t < kw; t++) {
                        double sum = 0;
                        for (int i = 0; i < os[2]; i++) {
                            int yi = i * c.stride() + u - c.padding();
                            if (yi < 0 || yi >= h) {
                                continue;
                            }
                            for (int j = 0; j < os[3]; j++) {
                                int xj = j * c.stride() + t - c.padding();
                                if (xj >= 0 && xj < wd) {
                                    sum += v[(plane + yi) * wd + xj];
                                }
                            }
                        }
                        m[(k * kh + u) * kw + t] += sum;
                    }
                }
            }
        }
        double count = Math.max(1, (double) n * os[2] * os[3]);
        for (int k = 0; k < m.length; k++) {
            m[k] /= count;
        }
        return m;
    }

    private static double[] meanOverBatch(Tensor x, int features, String layer) {
        if (x.rank() != 2 || x.dim(1) != features) {
            throw new IllegalArgumentException(layer + ": calibration activations shaped "
                    + Arrays.toString(x.shape()) + " do not fit " + features + " inputs");
        }
        float[] v = TensorAccess.data(x);
        int n = x.dim(0);
        double[] mean = new double[features];
        for (int s = 0; s < n; s++) {
            for (int j = 0; j < features; j++) {
                mean[j] += v[s * features + j];
            }
        }
        for (int j = 0; j < features; j++) {
            mean[j] /= Math.max(1, n);
        }
        return mean;
    }

    /** {@code b - (W~ - W) e}, with the weights seen as {@code [out, e.length]}. */
    static Tensor corrected(WeightedLayer reference, WeightedLayer quantized, double[] e) {
        float[] w = TensorAccess.data(reference.weight());
        float[] wq = TensorAccess.data(quantized.weight());
        float[] b = quantized.bias().toFloatArray();
        int in = e.length;
        for (int o = 0; o < b.length; o++) {
            double shift = 0;
            for (int j = 0; j < in; j++) {
                shift += ((double) wq[o * in + j] - w[o * in + j]) * e[j];
            }
            b[o] = (float) (b[o] - shift);
        }
        return Tensor.of(b, b.length).withName(quantized.bias().name());
    }
}
