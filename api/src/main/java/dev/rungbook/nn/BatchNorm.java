package dev.rungbook.nn;

import dev.rungbook.internal.TensorAccess;
import dev.rungbook.tensor.DType;
import dev.rungbook.tensor.Tensor;
import java.util.Arrays;

/**
 * Batch normalization (Ioffe &amp; Szegedy 2015) per channel of axis 1: {@code y = gamma (x - mean) / sqrt(var + eps)
 * + beta}. Works after a {@link Conv2d} ({@code [N, C, H, W]}, statistics over N, H and W) and after a {@link Linear}
 * ({@code [N, C]}, statistics over N).
 *
 * <p>The forward pass of this (immutable) layer uses the running mean and variance, as inference does. During
 * training ({@link Trainer}) the node normalizes with the batch's mean and biased variance and updates the running
 * statistics by {@code running = (1 - momentum) running + momentum batch}, with the unbiased batch variance, momentum
 * 0.1 (common practice). Checkpoint tensors: {@code NAME.weight} (gamma), {@code NAME.bias} (beta),
 * {@code NAME.running_mean}, {@code NAME.running_var}; eps defaults to 1e-5 (common practice).
 */
public final class BatchNorm implements Layer {
    /** The default epsilon, 1e-5 (common practice). */
    public static final double DEFAULT_EPS = 1e-5;
    /** The weight of the newest batch in the running statistics during training, 0.1 (common practice). */
    public static final double MOMENTUM = 0.1;

    private final String name;
    private final Tensor gamma;
    private final Tensor beta;
    private final Tensor mean;
    private final Tensor variance;
    private final double eps;

    /**
     * @param name the layer's name
     * @param gamma scale per channel, shaped [C]
     * @param beta shift per channel, [C]
     * @param mean running mean, [C]
     * @param variance running variance, [C], not negative
     * @param eps added to the variance, positive
     * @throws IllegalArgumentException naming the layer if shapes differ or a variance is negative
     */
    public BatchNorm(String name, Tensor gamma, Tensor beta, Tensor mean, Tensor variance, double eps) {
        int c = gamma.size();
        for (Tensor t : new Tensor[] {gamma, beta, mean, variance}) {
            if (t.rank() != 1 || t.dim(0) != c) {
                throw new IllegalArgumentException(name + ": batch-norm tensors must all be [C]; got gamma "
                        + Arrays.toString(gamma.shape()) + ", beta " + Arrays.toString(beta.shape()) + ", mean "
                        + Arrays.toString(mean.shape()) + ", variance " + Arrays.toString(variance.shape()));
            }
        }
        float[] v = TensorAccess.data(variance);
        for (int i = 0; i < v.length; i++) {
            if (!(v[i] >= 0)) {
                throw new IllegalArgumentException(name + ": running variance of channel " + i + " is " + v[i]);
            }
        }
        if (!(eps > 0)) {
            throw new IllegalArgumentException(name + ": eps must be positive, got " + eps);
        }
        this.name = name;
        this.gamma = gamma;
        this.beta = beta;
        this.mean = mean;
        this.variance = variance;
        this.eps = eps;
    }

    /** A batch norm that starts as the identity: gamma 1, beta 0, mean 0, variance 1, eps 1e-5. */
    public static BatchNorm initial(String name, int channels) {
        float[] ones = new float[channels];
        Arrays.fill(ones, 1f);
        return new BatchNorm(name, Tensor.of(ones.clone(), channels), Tensor.of(new float[channels], channels),
                Tensor.of(new float[channels], channels), Tensor.of(ones, channels), DEFAULT_EPS);
    }

    @Override
    public String name() {
        return name;
    }

    /** Channels. */
    public int channels() {
        return gamma.size();
    }

    /** Scale per channel (checkpoint {@code NAME.weight}). */
    public Tensor gamma() {
        return gamma;
    }

    /** Shift per channel (checkpoint {@code NAME.bias}). */
    public Tensor beta() {
        return beta;
    }

    /** Running mean per channel. */
    public Tensor mean() {
        return mean;
    }

    /** Running variance per channel. */
    public Tensor variance() {
        return variance;
    }

    /** The epsilon added to the variance. */
    public double eps() {
        return eps;
    }

    /** The per-channel factor {@code gamma / sqrt(var + eps)} of the inference form, in double. */
    public double[] scales() {
        double[] s = new double[channels()];
        for (int c = 0; c < s.length; c++) {
            s[c] = gamma.getFlat(c) / Math.sqrt(variance.getFlat(c) + eps);
        }
        return s;
    }

    /** The per-channel offset {@code beta - mean * gamma / sqrt(var + eps)} of the inference form, in double. */
    public double[] shifts() {
        double[] s = scales();
        double[] t = new double[s.length];
        for (int c = 0; c < s.length; c++) {
            t[c] = beta.getFlat(c) - mean.getFlat(c) * s[c];
        }
        return t;
    }

    private void checkInput(int[] shape) {
        if ((shape.length != 2 && shape.length != 4) || shape[1] != channels()) {
            throw new IllegalArgumentException(name + ": input shape " + Arrays.toString(shape) + " does not fit "
                    + channels() + " channels (expected [N, " + channels() + "] or [N, " + channels() + ", H, W])");
        }
    }

    private static int plane(int[] shape) {
        return shape.length == 4 ? shape[2] * shape[3] : 1;
    }

    @Override
    public Tensor forward(Tensor batch) {
        checkInput(batch.shape());
        float[] x = TensorAccess.data(batch);
        double[] s = scales();
        double[] t = shifts();
        int c = channels();
        int p = plane(batch.shape());
        float[] y = new float[x.length];
        for (int base = 0, ch = 0; base < x.length; base += p, ch = (ch + 1) % c) {
            float sc = (float) s[ch];
            float sh = (float) t[ch];
            for (int q = 0; q < p; q++) {
                y[base + q] = x[base + q] * sc + sh;
            }
        }
        return TensorAccess.wrap(y, batch.shape(), DType.F32, null);
    }

    /**
     * The training node. With {@code xhat} the normalized input, {@code M} values per channel and {@code g} the
     * output gradient: {@code dbeta = sum g}, {@code dgamma = sum g xhat},
     * {@code dx = gamma / sqrt(var + eps) (g - mean(g) - xhat mean(g xhat))}.
     */
    Node node() {
        int c = channels();
        Node.Param g = new Node.Param(name + ".weight", gamma.toFloatArray(), false);
        Node.Param b = new Node.Param(name + ".bias", beta.toFloatArray(), false);
        float[] runMean = mean.toFloatArray();
        float[] runVar = variance.toFloatArray();
        return new Node() {
            private float[] xhat;
            private double[] invStd;
            private int[] shape;
            private boolean batchStatistics;

            @Override
            Act forward(Act a, boolean training) {
                checkInput(a.shape());
                batchStatistics = training;
                shape = a.shape();
                float[] x = a.v();
                int p = plane(shape);
                int n = shape[0];
                double[] mu = new double[c];
                double[] var = new double[c];
                if (training) {
                    for (int s = 0; s < n; s++) {
                        for (int ch = 0; ch < c; ch++) {
                            int base = (s * c + ch) * p;
                            for (int q = 0; q < p; q++) {
                                mu[ch] += x[base + q];
                            }
                        }
                    }
                    long m = (long) n * p;
                    for (int ch = 0; ch < c; ch++) {
                        mu[ch] /= m;
                    }
                    for (int s = 0; s < n; s++) {
                        for (int ch = 0; ch < c; ch++) {
                            int base = (s * c + ch) * p;
                            for (int q = 0; q < p; q++) {
                                double d = x[base + q] - mu[ch];
                                var[ch] += d * d;
                            }
                        }
                    }
                    for (int ch = 0; ch < c; ch++) {
                        var[ch] /= m;
                        double unbiased = m > 1 ? var[ch] * m / (m - 1) : var[ch];
                        runMean[ch] = (float) ((1 - MOMENTUM) * runMean[ch] + MOMENTUM * mu[ch]);
                        runVar[ch] = (float) ((1 - MOMENTUM) * runVar[ch] + MOMENTUM * unbiased);
                    }
                } else {
                    for (int ch = 0; ch < c; ch++) {
                        mu[ch] = runMean[ch];
                        var[ch] = runVar[ch];
                    }
                }
                invStd = new double[c];
                for (int ch = 0; ch < c; ch++) {
                    invStd[ch] = 1 / Math.sqrt(var[ch] + eps);
                }
                xhat = new float[x.length];
                float[] y = new float[x.length];
                for (int s = 0; s < n; s++) {
                    for (int ch = 0; ch < c; ch++) {
                        int base = (s * c + ch) * p;
                        for (int q = 0; q < p; q++) {
                            float h = (float) ((x[base + q] - mu[ch]) * invStd[ch]);
                            xhat[base + q] = h;
                            y[base + q] = g.value[ch] * h + b.value[ch];
                        }
                    }
                }
                return new Act(y, shape);
            }

            @Override
            Act backward(Act gy, boolean needInput) {
                float[] gv = gy.v();
                int p = plane(shape);
                int n = shape[0];
                double[] sumG = new double[c];
                double[] sumGx = new double[c];
                for (int s = 0; s < n; s++) {
                    for (int ch = 0; ch < c; ch++) {
                        int base = (s * c + ch) * p;
                        for (int q = 0; q < p; q++) {
                            sumG[ch] += gv[base + q];
                            sumGx[ch] += gv[base + q] * (double) xhat[base + q];
                        }
                    }
                }
                for (int ch = 0; ch < c; ch++) {
                    b.grad[ch] += (float) sumG[ch];
                    g.grad[ch] += (float) sumGx[ch];
                }
                if (!needInput) {
                    return null;
                }
                double m = (double) n * p;
                float[] gx = new float[gv.length];
                for (int s = 0; s < n; s++) {
                    for (int ch = 0; ch < c; ch++) {
                        int base = (s * c + ch) * p;
                        double k = g.value[ch] * invStd[ch];
                        // with running statistics the normalization is a fixed affine map: dx = k g
                        double mg = batchStatistics ? sumG[ch] / m : 0;
                        double mgx = batchStatistics ? sumGx[ch] / m : 0;
                        for (int q = 0; q < p; q++) {
                            gx[base + q] = (float) (k * (gv[base + q] - mg - xhat[base + q] * mgx));
                        }
                    }
                }
                return new Act(gx, shape);
            }

            @Override
            java.util.List<Param> params() {
                return java.util.List.of(g, b);
            }

            @Override
            Layer layer() {
                return new BatchNorm(name, Tensor.of(g.value.clone(), c), Tensor.of(b.value.clone(), c),
                        Tensor.of(runMean.clone(), c), Tensor.of(runVar.clone(), c), eps);
            }
        };
    }

    @Override
    public String toString() {
        return "BatchNorm " + name + " " + channels() + " channels";
    }
}
