package dev.rungbook.nn;

import dev.rungbook.tensor.Tensor;
import java.util.ArrayList;
import java.util.List;

/**
 * Cross-layer equalization (Nagel et al., "Data-Free Quantization Through Weight Equalization and Bias Correction",
 * ICCV 2019) for chains of linear layers with ReLU (or nothing) between them.
 *
 * <p>For a pair {@code y = W2 relu(W1 x + b1) + b2}, let {@code r1_i} be the largest |weight| of output channel i of
 * W1 (row i) and {@code r2_i} the largest |weight| of input channel i of W2 (column i). With
 * {@code s_i = sqrt(r1_i / r2_i)}, the layer pair {@code W1 <- S^-1 W1, b1 <- S^-1 b1, W2 <- W2 S} computes the same
 * function, because {@code relu(x / s) = relu(x) / s} for {@code s > 0}, and both channel ranges become
 * {@code sqrt(r1_i r2_i)}. A chain of more than two layers is swept pair by pair, repeatedly, until no scale moves by
 * more than the tolerance. Channels whose range is zero on either side are left alone.
 */
public final class Equalization {
    private Equalization() {
    }

    /** The outcome: the equalized network and how many sweeps it took. */
    public record Result(Network network, int sweeps, double largestLastChange) {
    }

    /** Equalizes every consecutive pair of linear layers, sweeping up to 100 times or until scales change by less than 1e-6. */
    public static Result apply(Network net) {
        return apply(net, 100, 1e-6);
    }

    /**
     * Equalizes every consecutive pair of linear layers (only ReLU layers may stand between them).
     *
     * @param maxSweeps upper bound on sweeps over the chain
     * @param tolerance stop when every scale of a sweep is within {@code tolerance} of 1 (relative)
     */
    public static Result apply(Network net, int maxSweeps, double tolerance) {
        List<Layer> layers = new ArrayList<>(net.layers());
        List<Integer> linear = new ArrayList<>();
        for (int i = 0; i < layers.size(); i++) {
            Layer l = layers.get(i);
            if (l instanceof Linear) {
                linear.add(i);
            } else if (!(l instanceof Relu)) {
                throw new IllegalArgumentException("equalization needs linear layers with ReLU between them; got "
                        + l);
            }
        }
        int sweeps = 0;
        double change = 0;
        while (sweeps < maxSweeps) {
            sweeps++;
            change = 0;
            for (int p = 0; p + 1 < linear.size(); p++) {
                Linear a = (Linear) layers.get(linear.get(p));
                Linear b = (Linear) layers.get(linear.get(p + 1));
                Linear[] pair = new Linear[2];
                change = Math.max(change, equalizePair(a, b, pair));
                layers.set(linear.get(p), pair[0]);
                layers.set(linear.get(p + 1), pair[1]);
            }
            if (change < tolerance) {
                break;
            }
        }
        return new Result(Network.of(layers), sweeps, change);
    }

    /** Equalizes one pair into {@code out}; returns the largest |s_i - 1|. */
    static double equalizePair(Linear first, Linear second, Linear[] out) {
        int channels = first.outFeatures();
        if (second.inFeatures() != channels) {
            throw new IllegalArgumentException(first.name() + " gives " + channels + " features but "
                    + second.name() + " takes " + second.inFeatures());
        }
        int in1 = first.inFeatures();
        int out2 = second.outFeatures();
        float[] w1 = first.weight().toFloatArray();
        float[] b1 = first.bias().toFloatArray();
        float[] w2 = second.weight().toFloatArray();
        double[] s = scales(w1, in1, w2, out2, channels);
        double change = 0;
        for (int i = 0; i < channels; i++) {
            change = Math.max(change, Math.abs(s[i] - 1));
            if (s[i] == 1) {
                continue;
            }
            for (int j = 0; j < in1; j++) {
                w1[i * in1 + j] = (float) (w1[i * in1 + j] / s[i]);
            }
            b1[i] = (float) (b1[i] / s[i]);
            for (int o = 0; o < out2; o++) {
                w2[o * channels + i] = (float) (w2[o * channels + i] * s[i]);
            }
        }
        out[0] = first.withWeight(Tensor.of(w1, channels, in1)).withBias(Tensor.of(b1, channels));
        out[1] = second.withWeight(Tensor.of(w2, out2, channels));
        return change;
    }

    /** {@code s_i = sqrt(r1_i / r2_i)}, or 1 where either range is zero. */
    static double[] scales(float[] w1, int in1, float[] w2, int out2, int channels) {
        double[] s = new double[channels];
        for (int i = 0; i < channels; i++) {
            double r1 = 0;
            for (int j = 0; j < in1; j++) {
                r1 = Math.max(r1, Math.abs(w1[i * in1 + j]));
            }
            double r2 = 0;
            for (int o = 0; o < out2; o++) {
                r2 = Math.max(r2, Math.abs(w2[o * channels + i]));
            }
            s[i] = r1 > 0 && r2 > 0 ? Math.sqrt(r1 / r2) : 1;
        }
        return s;
    }
}
