package dev.rungbook.nn;

import dev.rungbook.internal.TensorAccess;
import dev.rungbook.tensor.DType;
import java.util.Arrays;
import java.util.List;

/** The structure of a network of linear layers with optional ReLU after each, and its backward pass. Package-private. */
final class Mlp {
    final int[] ins;
    final int[] outs;
    final boolean[] reluAfter;
    private final List<Linear> linears;

    private Mlp(List<Linear> linears, boolean[] reluAfter) {
        this.linears = linears;
        this.reluAfter = reluAfter;
        this.ins = new int[linears.size()];
        this.outs = new int[linears.size()];
        for (int l = 0; l < linears.size(); l++) {
            ins[l] = linears.get(l).inFeatures();
            outs[l] = linears.get(l).outFeatures();
        }
    }

    /** The structure of {@code net}, which must start with a linear layer and hold only linear and ReLU layers. */
    static Mlp of(Network net) {
        List<Linear> linears = net.linearLayers();
        boolean[] relu = new boolean[linears.size()];
        int li = -1;
        for (Layer l : net.layers()) {
            if (l instanceof Linear) {
                li++;
            } else if (l instanceof Relu && li >= 0) {
                relu[li] = true;
            } else {
                throw new IllegalArgumentException("training handles networks of linear and ReLU layers starting "
                        + "with a linear layer; got " + l);
            }
        }
        return new Mlp(linears, relu);
    }

    int depth() {
        return linears.size();
    }

    float[][] weights() {
        float[][] w = new float[depth()][];
        for (int l = 0; l < depth(); l++) {
            w[l] = linears.get(l).weight().toFloatArray();
        }
        return w;
    }

    float[][] biases() {
        float[][] b = new float[depth()][];
        for (int l = 0; l < depth(); l++) {
            b[l] = linears.get(l).bias().toFloatArray();
        }
        return b;
    }

    /** {@code start} with its linear layers' parameters replaced by {@code w} and {@code b} (arrays handed over). */
    Network network(Network start, float[][] w, float[][] b) {
        int[] k = {0};
        return start.mapLinear(lin -> {
            int l = k[0]++;
            return new Linear(lin.name(),
                    TensorAccess.wrap(w[l], new int[] {outs[l], ins[l]}, DType.F32, lin.name() + ".weight"),
                    TensorAccess.wrap(b[l], new int[] {outs[l]}, DType.F32, lin.name() + ".bias"));
        });
    }

    /**
     * The mean softmax cross-entropy of the batch {@code x} ([m, ins[0]]) with {@code labels}, and its gradients with
     * respect to every weight and bias, written into {@code gw} and {@code gb} (overwritten).
     */
    double lossAndGradients(float[][] w, float[][] b, float[] x, int[] labels, float[][] gw, float[][] gb) {
        int depth = depth();
        int m = labels.length;
        float[][] act = new float[depth + 1][];
        act[0] = x;
        for (int l = 0; l < depth; l++) {
            act[l + 1] = new float[m * outs[l]];
            Dense.matmulTransposedB(act[l], w[l], act[l + 1], m, ins[l], outs[l]);
            for (int s = 0; s < m; s++) {
                for (int o = 0; o < outs[l]; o++) {
                    float v = act[l + 1][s * outs[l] + o] + b[l][o];
                    act[l + 1][s * outs[l] + o] = reluAfter[l] ? Math.max(0f, v) : v;
                }
            }
        }
        int classes = outs[depth - 1];
        float[] z = act[depth];
        float[] g = new float[m * classes];
        double loss = 0;
        for (int s = 0; s < m; s++) {
            double max = Double.NEGATIVE_INFINITY;
            for (int c = 0; c < classes; c++) {
                max = Math.max(max, z[s * classes + c]);
            }
            double sum = 0;
            for (int c = 0; c < classes; c++) {
                sum += Math.exp(z[s * classes + c] - max);
            }
            int label = labels[s];
            loss -= z[s * classes + label] - max - Math.log(sum);
            // d(mean loss)/d(logit) = (softmax - onehot) / m
            for (int c = 0; c < classes; c++) {
                double p = Math.exp(z[s * classes + c] - max) / sum;
                g[s * classes + c] = (float) ((p - (c == label ? 1 : 0)) / m);
            }
        }
        for (int l = depth - 1; l >= 0; l--) {
            if (reluAfter[l]) {
                float[] a = act[l + 1];
                for (int k = 0; k < g.length; k++) {
                    if (a[k] <= 0f) {
                        g[k] = 0f;
                    }
                }
            }
            Arrays.fill(gw[l], 0f);
            Arrays.fill(gb[l], 0f);
            Dense.addMatmulTransposedA(g, act[l], gw[l], m, outs[l], ins[l]);
            for (int s = 0; s < m; s++) {
                for (int o = 0; o < outs[l]; o++) {
                    gb[l][o] += g[s * outs[l] + o];
                }
            }
            if (l > 0) {
                float[] next = new float[m * ins[l]];
                Dense.matmul(g, w[l], next, m, outs[l], ins[l]);
                g = next;
            }
        }
        return loss / m;
    }
}
