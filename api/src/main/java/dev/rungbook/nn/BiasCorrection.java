package dev.rungbook.nn;

import dev.rungbook.internal.TensorAccess;
import dev.rungbook.tensor.Tensor;
import java.util.ArrayList;
import java.util.List;
import org.apache.commons.math3.distribution.NormalDistribution;

/**
 * Bias correction (Nagel et al., ICCV 2019): quantizing a weight W to W~ shifts the layer's expected output by
 * {@code (W~ - W) E[x]}; subtracting that from the bias brings the mean output error per channel back to about zero.
 *
 * <p>{@link #empirical} estimates {@code E[x]} per layer from calibration inputs run through the quantized network
 * up to that layer (so that corrections of earlier layers are taken into account). {@link #expectedReluOfNormal}
 * gives the analytic {@code E[x]} when the input of a ReLU is normal with known mean and standard deviation, as
 * after a BatchNorm layer with shift beta and scale gamma.
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
     * Corrects the biases of {@code quantized} (a network whose linear layers hold quantized-and-dequantized weights
     * of {@code reference}, layer for layer) from calibration inputs [N, in]: layer by layer, {@code E[x]} is the mean
     * of the layer's input in the corrected quantized network, and {@code b <- b - (W~ - W) E[x]}.
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
            if (layer instanceof Linear) {
                if (!(ref.get(i) instanceof Linear)) {
                    throw new IllegalArgumentException("layer " + i + " is linear in one network only");
                }
                Linear lq = (Linear) layer;
                Linear lr = (Linear) ref.get(i);
                layer = lq.withBias(corrected(lr, lq, meanOverBatch(x, lq.inFeatures(), lq.name())));
            }
            out.add(layer);
            x = layer.forward(x);
        }
        return Network.of(out);
    }

    private static double[] meanOverBatch(Tensor x, int features, String layer) {
        if (x.rank() != 2 || x.dim(1) != features) {
            throw new IllegalArgumentException(layer + ": calibration activations shaped "
                    + java.util.Arrays.toString(x.shape()) + " do not fit " + features + " inputs");
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

    /** {@code b - (W~ - W) e}. */
    static Tensor corrected(Linear reference, Linear quantized, double[] e) {
        float[] w = TensorAccess.data(reference.weight());
        float[] wq = TensorAccess.data(quantized.weight());
        float[] b = quantized.bias().toFloatArray();
        int in = quantized.inFeatures();
        for (int o = 0; o < b.length; o++) {
            double shift = 0;
            for (int j = 0; j < in; j++) {
                shift += ((double) wq[o * in + j] - w[o * in + j]) * e[j];
            }
            b[o] = (float) (b[o] - shift);
        }
        return Tensor.of(b, b.length);
    }
}
