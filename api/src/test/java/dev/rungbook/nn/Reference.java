package dev.rungbook.nn;

/**
 * Double-precision reference forward passes written from the layers' definitions, one output at a time (paths
 * independent of the im2col and matmul kernels), for forward checks and finite-difference gradient checks.
 */
final class Reference {
    private Reference() {
    }

    /** Values and shape of a reference activation. */
    record Out(double[] v, int[] shape) {
    }

    /** A layer's reference: output for input {@code x} shaped {@code s} and parameters {@code p} (node order). */
    interface Fn {
        Out apply(double[] x, int[] s, double[][] p);
    }

    static double[] toDouble(float[] v) {
        double[] d = new double[v.length];
        for (int i = 0; i < v.length; i++) {
            d[i] = v[i];
        }
        return d;
    }

    /** {@code y = x W^T + b}; p = {W [out, in], b}. */
    static Out linear(double[] x, int[] s, double[][] p) {
        int n = s[0];
        int in = s[1];
        int out = p[1].length;
        double[] y = new double[n * out];
        for (int i = 0; i < n; i++) {
            for (int o = 0; o < out; o++) {
                double acc = p[1][o];
                for (int j = 0; j < in; j++) {
                    acc += x[i * in + j] * p[0][o * in + j];
                }
                y[i * out + o] = acc;
            }
        }
        return new Out(y, new int[] {n, out});
    }

    /** The direct 2-D cross-correlation with zero padding; w shaped {@code ws}. */
    static Out conv(double[] x, int[] xs, double[] w, int[] ws, double[] b, int stride, int pad) {
        int n = xs[0];
        int c = xs[1];
        int h = xs[2];
        int wd = xs[3];
        int o = ws[0];
        int kh = ws[2];
        int kw = ws[3];
        int oh = (h + 2 * pad - kh) / stride + 1;
        int ow = (wd + 2 * pad - kw) / stride + 1;
        double[] y = new double[n * o * oh * ow];
        for (int s = 0; s < n; s++) {
            for (int f = 0; f < o; f++) {
                for (int i = 0; i < oh; i++) {
                    for (int j = 0; j < ow; j++) {
                        double acc = b[f];
                        for (int ch = 0; ch < c; ch++) {
                            for (int u = 0; u < kh; u++) {
                                for (int v = 0; v < kw; v++) {
                                    int r = i * stride - pad + u;
                                    int q = j * stride - pad + v;
                                    if (r >= 0 && r < h && q >= 0 && q < wd) {
                                        acc += w[((f * c + ch) * kh + u) * kw + v] * x[((s * c + ch) * h + r) * wd + q];
                                    }
                                }
                            }
                        }
                        y[((s * o + f) * oh + i) * ow + j] = acc;
                    }
                }
            }
        }
        return new Out(y, new int[] {n, o, oh, ow});
    }

    /** Training-mode batch norm: batch mean and biased variance per channel of axis 1; p = {gamma, beta}. */
    static Out batchNormTraining(double[] x, int[] s, double[][] p, double eps) {
        int c = s[1];
        int plane = s.length == 4 ? s[2] * s[3] : 1;
        int n = s[0];
        double[] y = new double[x.length];
        for (int ch = 0; ch < c; ch++) {
            double sum = 0;
            for (int i = 0; i < n; i++) {
                for (int q = 0; q < plane; q++) {
                    sum += x[(i * c + ch) * plane + q];
                }
            }
            double mean = sum / (n * plane);
            double ss = 0;
            for (int i = 0; i < n; i++) {
                for (int q = 0; q < plane; q++) {
                    double d = x[(i * c + ch) * plane + q] - mean;
                    ss += d * d;
                }
            }
            double sd = Math.sqrt(ss / (n * plane) + eps);
            for (int i = 0; i < n; i++) {
                for (int q = 0; q < plane; q++) {
                    int k = (i * c + ch) * plane + q;
                    y[k] = p[0][ch] * (x[k] - mean) / sd + p[1][ch];
                }
            }
        }
        return new Out(y, s);
    }

    /** Element-wise clip to {@code [lo, hi]} (ReLU: 0, infinity; ReLU6: 0, 6). */
    static Out clip(double[] x, int[] s, double lo, double hi) {
        double[] y = new double[x.length];
        for (int i = 0; i < x.length; i++) {
            y[i] = Math.min(hi, Math.max(lo, x[i]));
        }
        return new Out(y, s);
    }

    /** Max or average pooling of square windows without padding. */
    static Out pool(double[] x, int[] s, int k, int stride, boolean max) {
        int oh = (s[2] - k) / stride + 1;
        int ow = (s[3] - k) / stride + 1;
        double[] y = new double[s[0] * s[1] * oh * ow];
        for (int pl = 0; pl < s[0] * s[1]; pl++) {
            for (int i = 0; i < oh; i++) {
                for (int j = 0; j < ow; j++) {
                    double acc = max ? Double.NEGATIVE_INFINITY : 0;
                    for (int u = 0; u < k; u++) {
                        for (int v = 0; v < k; v++) {
                            double xv = x[(pl * s[2] + i * stride + u) * s[3] + j * stride + v];
                            acc = max ? Math.max(acc, xv) : acc + xv;
                        }
                    }
                    y[(pl * oh + i) * ow + j] = max ? acc : acc / (k * k);
                }
            }
        }
        return new Out(y, new int[] {s[0], s[1], oh, ow});
    }

    /** Mean softmax cross-entropy of logits [m, k]. */
    static double crossEntropy(double[] z, int k, int[] labels) {
        double total = 0;
        for (int s = 0; s < labels.length; s++) {
            double max = Double.NEGATIVE_INFINITY;
            for (int c = 0; c < k; c++) {
                max = Math.max(max, z[s * k + c]);
            }
            double sum = 0;
            for (int c = 0; c < k; c++) {
                sum += Math.exp(z[s * k + c] - max);
            }
            total += Math.log(sum) + max - z[s * k + labels[s]];
        }
        return total / labels.length;
    }
}
