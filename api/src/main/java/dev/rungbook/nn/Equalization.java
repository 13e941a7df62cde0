package dev.rungbook.nn;

import dev.rungbook.tensor.Tensor;
import java.util.ArrayList;
import java.util.List;

/**
 * Cross-layer equalization (Nagel et al., "Data-Free Quantization Through Weight Equalization and Bias Correction",
 * ICCV 2019) for chains of linear and convolution layers with ReLU (or nothing) between them.
 *
 * <p>For a pair {@code y = W2 f(W1 x + b1) + b2} with {@code f} positively homogeneous per channel, let {@code r1_i}
 * be the largest |weight| of output channel i of W1 (its row, or its {@code [in, kh, kw]} block for a convolution)
 * and {@code r2_i} the largest |weight| W2 applies to channel i. With {@code s_i = sqrt(r1_i r2_i) / r2_i}, the pair
 * {@code W1 <- S^-1 W1, b1 <- S^-1 b1, W2 <- W2 S} computes the same function, because {@code f(x / s) = f(x) / s}
 * for {@code s > 0}, and both channel ranges become {@code sqrt(r1_i r2_i)}. A chain of more than two weighted layers
 * is swept pair by pair, repeatedly, until no scale of a sweep differs from 1 by more than the tolerance. Channels
 * whose range is zero on either side are left alone.
 *
 * <p>What may stand between the two layers of a pair: {@link Relu}, {@link Identity}, {@link Pool2d} (max pooling
 * commutes with a positive per-channel factor, average pooling is linear per channel) and {@link Flatten}. Through a
 * flatten, channel i of a {@code [N, C, H, W]} map becomes the block of features {@code [i H W, (i + 1) H W)} of the
 * next linear layer, and that whole block is scaled by {@code s_i} (and enters {@code r2_i}). Refused with an error
 * naming the layers: an unfolded {@link BatchNorm} between a pair (fold it first with
 * {@link Network#foldBatchNorm()}), a {@link Relu6} (its clip at 6 does not commute with scaling), and any other
 * layer. Layers before the first and after the last weighted layer are not touched.
 *
 * <p>{@link #absorbHighBias} then moves the part of each channel's bias that a following ReLU always passes into the
 * next layer (the high-bias absorption of the same paper, from batch-norm statistics).
 */
public final class Equalization {
    private Equalization() {
    }

    /**
     * The outcome.
     *
     * @param network the equalized network
     * @param sweeps how many sweeps over the chain were made
     * @param largestLastChange the largest {@code |s_i - 1|} of the last sweep
     */
    public record Result(Network network, int sweeps, double largestLastChange) {
    }

    /** Equalizes every consecutive pair of weighted layers, up to 100 sweeps or until scales move by less than 1e-6. */
    public static Result apply(Network net) {
        return apply(net, 100, 1e-6);
    }

    /**
     * Equalizes every consecutive pair of weighted layers (linear or convolution).
     *
     * @param maxSweeps upper bound on sweeps over the chain, at least 1
     * @param tolerance stop when every scale of a sweep is within {@code tolerance} of 1 (relative)
     * @throws IllegalArgumentException naming the layers if something other than ReLU, identity, pooling or flatten
     *     stands between two weighted layers, or if their channel counts do not fit
     */
    public static Result apply(Network net, int maxSweeps, double tolerance) {
        if (maxSweeps < 1) {
            throw new IllegalArgumentException("maxSweeps must be at least 1, got " + maxSweeps);
        }
        List<Layer> layers = new ArrayList<>(net.layers());
        List<Integer> weighted = new ArrayList<>();
        for (int i = 0; i < layers.size(); i++) {
            if (layers.get(i) instanceof WeightedLayer) {
                weighted.add(i);
            }
        }
        boolean[] flattened = new boolean[weighted.size()];
        for (int p = 0; p + 1 < weighted.size(); p++) {
            flattened[p] = checkBetween(layers, weighted.get(p), weighted.get(p + 1));
        }
        int sweeps = 0;
        double change = 0;
        while (sweeps < maxSweeps) {
            sweeps++;
            change = 0;
            for (int p = 0; p + 1 < weighted.size(); p++) {
                WeightedLayer a = (WeightedLayer) layers.get(weighted.get(p));
                WeightedLayer b = (WeightedLayer) layers.get(weighted.get(p + 1));
                WeightedLayer[] pair = new WeightedLayer[2];
                change = Math.max(change, equalizePair(a, b, pair));
                layers.set(weighted.get(p), pair[0]);
                layers.set(weighted.get(p + 1), pair[1]);
            }
            if (change < tolerance) {
                break;
            }
        }
        return new Result(Network.of(layers), sweeps, change);
    }

    /** Checks the layers strictly between {@code from} and {@code to}; returns whether a flatten is among them. */
    private static boolean checkBetween(List<Layer> layers, int from, int to) {
        String pair = " between " + layers.get(from).name() + " and " + layers.get(to).name();
        boolean flatten = false;
        for (int i = from + 1; i < to; i++) {
            Layer l = layers.get(i);
            if (l instanceof BatchNorm) {
                throw new IllegalArgumentException("equalization: unfolded batch norm " + l.name() + pair
                        + "; fold it into the preceding layer first (Network.foldBatchNorm())");
            } else if (l instanceof Relu6) {
                throw new IllegalArgumentException("equalization: " + l.name() + pair
                        + " is a ReLU6, which is not positively homogeneous (min(max(0, x / s), 6) differs from "
                        + "min(max(0, x), 6) / s), so the layers cannot be rescaled against each other");
            } else if (l instanceof Flatten) {
                flatten = true;
            } else if (!(l instanceof Relu || l instanceof Identity || l instanceof Pool2d)) {
                throw new IllegalArgumentException("equalization: " + l + pair
                        + " is not one of ReLU, identity, pooling or flatten");
            }
        }
        WeightedLayer b = (WeightedLayer) layers.get(to);
        if (b instanceof Conv2d && flatten) {
            throw new IllegalArgumentException("equalization: a flatten" + pair + " feeds a convolution");
        }
        return flatten;
    }

    /**
     * Equalizes one pair into {@code out} (the second layer's weight seen as {@code [out2, C * P]}, channel i owning
     * the columns {@code [i P, (i + 1) P)}); returns the largest {@code |s_i - 1|}.
     */
    static double equalizePair(WeightedLayer first, WeightedLayer second, WeightedLayer[] out) {
        int channels = first.weight().dim(0);
        float[] w1 = first.weight().toFloatArray();
        float[] b1 = first.bias().toFloatArray();
        float[] w2 = second.weight().toFloatArray();
        int out2 = second.weight().dim(0);
        int in2 = w2.length / out2;
        int secondChannels = second.weight().dim(1);
        if (second instanceof Conv2d ? secondChannels != channels : in2 % channels != 0) {
            throw new IllegalArgumentException("equalization: " + first.name() + " gives " + channels
                    + " channels but " + second.name() + " takes " + (second instanceof Conv2d ? secondChannels
                    : in2 + " features (not a whole number per channel)"));
        }
        int per1 = w1.length / channels;
        int block = in2 / channels;
        double[] s = scales(w1, per1, w2, out2, in2, block, channels);
        double change = 0;
        for (int i = 0; i < channels; i++) {
            change = Math.max(change, Math.abs(s[i] - 1));
            if (s[i] == 1) {
                continue;
            }
            for (int j = i * per1; j < (i + 1) * per1; j++) {
                w1[j] = (float) (w1[j] / s[i]);
            }
            b1[i] = (float) (b1[i] / s[i]);
            for (int o = 0; o < out2; o++) {
                for (int j = o * in2 + i * block; j < o * in2 + (i + 1) * block; j++) {
                    w2[j] = (float) (w2[j] * s[i]);
                }
            }
        }
        out[0] = first.withWeight(Tensor.of(w1, first.weight().shape()).withName(first.weight().name()))
                .withBias(Tensor.of(b1, channels).withName(first.bias().name()));
        out[1] = second.withWeight(Tensor.of(w2, second.weight().shape()).withName(second.weight().name()));
        return change;
    }

    /**
     * {@code s_i = sqrt(r1_i r2_i) / r2_i}, or 1 where either range is zero; {@code r1_i} is the largest |w1| of
     * the {@code per1} values of channel i, {@code r2_i} the largest |w2| over the columns {@code [i block,
     * (i + 1) block)} of every row of the {@code [out2, in2]} matrix w2.
     */
    static double[] scales(float[] w1, int per1, float[] w2, int out2, int in2, int block, int channels) {
        double[] s = new double[channels];
        for (int i = 0; i < channels; i++) {
            double r1 = 0;
            for (int j = i * per1; j < (i + 1) * per1; j++) {
                r1 = Math.max(r1, Math.abs(w1[j]));
            }
            double r2 = 0;
            for (int o = 0; o < out2; o++) {
                for (int j = o * in2 + i * block; j < o * in2 + (i + 1) * block; j++) {
                    r2 = Math.max(r2, Math.abs(w2[j]));
                }
            }
            s[i] = r1 > 0 && r2 > 0 ? Math.sqrt(r1 * r2) / r2 : 1;
        }
        return s;
    }

    /**
     * High-bias absorption (same paper) from batch-norm statistics. {@code reference} is the float network with its
     * batch norms unfolded; {@code equalized} holds the weighted layers of {@code reference.foldBatchNorm()}, possibly
     * equalized (same names and shapes). For every weighted layer followed by {@code BatchNorm -> ReLU} and, after
     * pooling, identity or flatten only, by another weighted layer: the batch norm's {@code beta_i} and
     * {@code |gamma_i|} describe channel i's pre-activation as {@code N(beta_i, gamma_i^2)}; divided by the channel's
     * equalization scale {@code s_i} (its row range in the folded layer over its row range in {@code equalized}),
     * {@code c_i = max(0, beta_i / s_i - 3 |gamma_i| / s_i)} is a value the pre-activation stays above with
     * probability 99.87% under that normal model (the paper's three-sigma rule). Then {@code b1_i <- b1_i - c_i} and
     * the next layer's bias {@code b2 <- b2 + W2 c} (over every weight that reads channel i: its block of features
     * after a flatten, its whole kernel window for a convolution). The function is unchanged wherever the
     * pre-activation is at least {@code c_i}; for a padded next convolution also only where its window lies inside
     * the input (padded zeros should have become {@code -c_i}). The activation ranges of the first layer shrink by
     * {@code c}, which is the point: finer activation grids.
     *
     * @throws IllegalArgumentException if the networks do not match
     */
    public static Network absorbHighBias(Network reference, Network equalized) {
        List<WeightedLayer> folded = reference.foldBatchNorm().weightedLayers();
        List<WeightedLayer> eq = new ArrayList<>(equalized.weightedLayers());
        if (folded.size() != eq.size()) {
            throw new IllegalArgumentException("high-bias absorption: the folded reference has " + folded.size()
                    + " weighted layers, the equalized network " + eq.size());
        }
        for (int w = 0; w < eq.size(); w++) {
            if (!folded.get(w).name().equals(eq.get(w).name())
                    || !java.util.Arrays.equals(folded.get(w).weight().shape(), eq.get(w).weight().shape())) {
                throw new IllegalArgumentException("high-bias absorption: weighted layer " + folded.get(w).name()
                        + " of the reference meets " + eq.get(w).name() + " in the equalized network");
            }
        }
        List<Layer> ref = reference.layers();
        int w = -1;
        for (int k = 0; k < ref.size(); k++) {
            if (!(ref.get(k) instanceof WeightedLayer)) {
                continue;
            }
            w++;
            if (w + 1 >= eq.size() || k + 2 >= ref.size() || !(ref.get(k + 1) instanceof BatchNorm)
                    || !(ref.get(k + 2) instanceof Relu)) {
                continue;
            }
            int j = k + 3;
            while (j < ref.size() && (ref.get(j) instanceof Pool2d || ref.get(j) instanceof Flatten
                    || ref.get(j) instanceof Identity)) {
                j++;
            }
            if (j >= ref.size() || !(ref.get(j) instanceof WeightedLayer)) {
                continue;
            }
            BatchNorm bn = (BatchNorm) ref.get(k + 1);
            WeightedLayer[] pair = absorb(bn, folded.get(w), eq.get(w), eq.get(w + 1));
            eq.set(w, pair[0]);
            eq.set(w + 1, pair[1]);
        }
        int[] next = {0};
        return equalized.mapWeighted(l -> eq.get(next[0]++));
    }

    private static WeightedLayer[] absorb(BatchNorm bn, WeightedLayer folded, WeightedLayer first,
            WeightedLayer second) {
        int channels = first.weight().dim(0);
        float[] wf = first.weight().toFloatArray();
        float[] w0 = folded.weight().toFloatArray();
        float[] b1 = first.bias().toFloatArray();
        float[] w2 = second.weight().toFloatArray();
        float[] b2 = second.bias().toFloatArray();
        int per1 = wf.length / channels;
        int out2 = second.weight().dim(0);
        int in2 = w2.length / out2;
        int block = in2 / channels;
        for (int i = 0; i < channels; i++) {
            double r0 = 0;
            double r1 = 0;
            for (int t = i * per1; t < (i + 1) * per1; t++) {
                r0 = Math.max(r0, Math.abs(w0[t]));
                r1 = Math.max(r1, Math.abs(wf[t]));
            }
            double s = r0 > 0 && r1 > 0 ? r0 / r1 : 1;
            double c = Math.max(0, (bn.beta().getFlat(i) - 3 * Math.abs(bn.gamma().getFlat(i))) / s);
            if (c == 0) {
                continue;
            }
            b1[i] = (float) (b1[i] - c);
            for (int o = 0; o < out2; o++) {
                double add = 0;
                for (int t = o * in2 + i * block; t < o * in2 + (i + 1) * block; t++) {
                    add += w2[t];
                }
                b2[o] = (float) (b2[o] + add * c);
            }
        }
        return new WeightedLayer[] {first.withBias(Tensor.of(b1, channels).withName(first.bias().name())),
            second.withBias(Tensor.of(b2, out2).withName(second.bias().name()))};
    }
}
