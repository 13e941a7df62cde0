package dev.rungbook.round;

import dev.rungbook.tensor.Tensor;
import java.util.Random;

/**
 * Seeded layers, calibration inputs and an independent output-error measure for the learned-rounding checks. The
 * error is computed here in double with plain loops, not with the code under test.
 */
final class LearnedRoundingFixtures {
    private LearnedRoundingFixtures() {
    }

    /**
     * {@code n x in} inputs with correlated features: {@code k} shared latent factors mixed at random, plus 10%
     * independent noise, and a different scale per feature.
     */
    static float[] correlatedInputs(long seed, int n, int in, int k) {
        Random r = new Random(seed);
        double[][] mix = new double[k][in];
        for (int a = 0; a < k; a++) {
            for (int j = 0; j < in; j++) {
                mix[a][j] = r.nextGaussian();
            }
        }
        double[] featureScale = new double[in];
        for (int j = 0; j < in; j++) {
            featureScale[j] = 0.5 + r.nextDouble();
        }
        float[] x = new float[n * in];
        double[] z = new double[k];
        for (int i = 0; i < n; i++) {
            for (int a = 0; a < k; a++) {
                z[a] = r.nextGaussian();
            }
            for (int j = 0; j < in; j++) {
                double v = 0;
                for (int a = 0; a < k; a++) {
                    v += z[a] * mix[a][j];
                }
                x[i * in + j] = (float) (featureScale[j] * (v / Math.sqrt(k) + 0.1 * r.nextGaussian()));
            }
        }
        return x;
    }

    static float[] gaussian(long seed, int size, double sd) {
        Random r = new Random(seed);
        float[] w = new float[size];
        for (int i = 0; i < size; i++) {
            w[i] = (float) (sd * r.nextGaussian());
        }
        return w;
    }

    /** A symmetric signed per-row grid ({@code -2^(b-1) .. 2^(b-1) - 1}, scale max|row| / qmax). */
    static GridAssignment perRowGrid(float[] w, int rows, int cols, int bits) {
        int qmax = (1 << (bits - 1)) - 1;
        float[] s = new float[rows];
        for (int r = 0; r < rows; r++) {
            double m = 0;
            for (int j = 0; j < cols; j++) {
                m = Math.max(m, Math.abs(w[r * cols + j]));
            }
            s[r] = (float) (m > 0 ? m / qmax : 1);
        }
        return GridAssignment.of(new int[] {rows, cols}, 0, 0, -qmax - 1, qmax, s, new float[rows]);
    }

    static int[] nearest(GridAssignment g, float[] w) {
        int[] c = new int[w.length];
        for (int i = 0; i < w.length; i++) {
            c[i] = g.nearestCode(i, w[i]);
        }
        return c;
    }

    static double[] values(GridAssignment g, int[] codes) {
        double[] v = new double[codes.length];
        for (int i = 0; i < codes.length; i++) {
            v[i] = g.value(i, codes[i]);
        }
        return v;
    }

    /**
     * Mean over samples of {@code ||f(W x + b) - f(W~ x + b)||^2} in double, straight from the definition.
     *
     * @param bias one per row or null
     */
    static double outputError(float[] w, double[] wq, int rows, int cols, float[] x, int n, float[] bias,
            boolean relu) {
        double sum = 0;
        for (int i = 0; i < n; i++) {
            for (int r = 0; r < rows; r++) {
                double a = bias == null ? 0 : bias[r];
                double b = a;
                for (int j = 0; j < cols; j++) {
                    a += w[r * cols + j] * (double) x[i * cols + j];
                    b += wq[r * cols + j] * x[i * cols + j];
                }
                if (relu) {
                    a = Math.max(0, a);
                    b = Math.max(0, b);
                }
                sum += (a - b) * (a - b);
            }
        }
        return sum / n;
    }

    static double outputError(float[] w, GridAssignment g, int[] codes, int rows, int cols, float[] x, int n) {
        return outputError(w, values(g, codes), rows, cols, x, n, null, false);
    }

    /**
     * The smallest output error over all {@code 2^size} choices of rounding each weight down or up
     * ({@code floor} or {@code floor + 1} of {@code w / s + z}, clamped to the code range): exhaustive search.
     */
    static double bruteForceBest(float[] w, GridAssignment g, int rows, int cols, float[] x, int n) {
        int size = w.length;
        if (size > 16) {
            throw new IllegalArgumentException("brute force is for at most 16 weights, got " + size);
        }
        // Gram matrix G = X^T X / n in double: error = sum_r d_r^T G d_r with d_r = w_r - wq_r.
        double[] gram = new double[cols * cols];
        for (int i = 0; i < n; i++) {
            for (int a = 0; a < cols; a++) {
                for (int b = 0; b < cols; b++) {
                    gram[a * cols + b] += (double) x[i * cols + a] * x[i * cols + b] / n;
                }
            }
        }
        double[] down = new double[size];
        double[] up = new double[size];
        for (int e = 0; e < size; e++) {
            double f = Math.floor(g.scaled(e, w[e]));
            down[e] = w[e] - g.value(e, (int) Math.max(g.qmin(), Math.min(g.qmax(), f)));
            up[e] = w[e] - g.value(e, (int) Math.max(g.qmin(), Math.min(g.qmax(), f + 1)));
        }
        double best = Double.POSITIVE_INFINITY;
        double[] d = new double[size];
        for (int mask = 0; mask < 1 << size; mask++) {
            for (int e = 0; e < size; e++) {
                d[e] = (mask >> e & 1) != 0 ? up[e] : down[e];
            }
            double err = 0;
            for (int r = 0; r < rows; r++) {
                for (int a = 0; a < cols; a++) {
                    double s = 0;
                    for (int b = 0; b < cols; b++) {
                        s += gram[a * cols + b] * d[r * cols + b];
                    }
                    err += d[r * cols + a] * s;
                }
            }
            best = Math.min(best, err);
        }
        return best;
    }

    static Tensor tensor(float[] v, int... shape) {
        return Tensor.of(v, shape);
    }
}
