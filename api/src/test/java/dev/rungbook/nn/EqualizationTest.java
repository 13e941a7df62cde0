package dev.rungbook.nn;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.internal.TensorAccess;
import dev.rungbook.quant.Quantizer;
import dev.rungbook.tensor.Tensor;
import java.util.Random;
import org.junit.jupiter.api.Test;

class EqualizationTest {
    /** A 3-layer MLP whose first layer's channel ranges differ by orders of magnitude (function-preserving skew). */
    static Network imbalanced(long seed) {
        Network net = Trainer.initialMlp(seed, 16, 32, 24, 4);
        Random r = new Random(seed);
        Linear fc1 = net.linearLayers().get(0);
        Linear fc2 = net.linearLayers().get(1);
        float[] w1 = fc1.weight().toFloatArray();
        float[] b1 = new float[32];
        float[] w2 = fc2.weight().toFloatArray();
        for (int i = 0; i < 32; i++) {
            float s = (float) Math.exp(2 * r.nextGaussian());
            b1[i] = (float) (0.1 * r.nextGaussian()) * s;
            for (int j = 0; j < 16; j++) {
                w1[i * 16 + j] *= s;
            }
            for (int o = 0; o < 24; o++) {
                w2[o * 32 + i] /= s;
            }
        }
        Linear n1 = fc1.withWeight(Tensor.of(w1, 32, 16)).withBias(Tensor.of(b1, 32));
        Linear n2 = fc2.withWeight(Tensor.of(w2, 24, 32));
        return net.mapLinear(l -> l == fc1 ? n1 : l == fc2 ? n2 : l);
    }

    static Tensor inputs(long seed, int n, int features) {
        Random r = new Random(seed);
        float[] x = new float[n * features];
        for (int i = 0; i < x.length; i++) {
            x[i] = (float) r.nextGaussian();
        }
        return Tensor.of(x, n, features);
    }

    static double maxRelativeDifference(Tensor a, Tensor b) {
        float[] x = TensorAccess.data(a);
        float[] y = TensorAccess.data(b);
        double scale = 0;
        double diff = 0;
        for (int i = 0; i < x.length; i++) {
            scale = Math.max(scale, Math.abs(x[i]));
            diff = Math.max(diff, Math.abs(x[i] - y[i]));
        }
        return diff / scale;
    }

    @Test
    void keepsTheFloatFunction() {
        // Source: positive homogeneity of ReLU, relu(x/s) = relu(x)/s for s > 0 (the equalization paper's argument).
        Network net = imbalanced(1);
        Network eq = Equalization.apply(net).network();
        Tensor x = inputs(2, 200, 16);
        assertTrue(maxRelativeDifference(net.forward(x), eq.forward(x)) < 1e-5);
    }

    @Test
    void pairRangesBecomeTheGeometricMean() {
        // Source: check-values.md §8: after s_i = sqrt(r1_i / r2_i) both channel ranges are sqrt(r1_i r2_i)
        // (algebra computed).
        Network net = imbalanced(3);
        Linear a = net.linearLayers().get(0);
        Linear b = net.linearLayers().get(1);
        WeightedLayer[] out = new WeightedLayer[2];
        Equalization.equalizePair(a, b, out);
        for (int i = 0; i < 32; i++) {
            double r1 = rowMax(a.weight(), i);
            double r2 = columnMax(b.weight(), i);
            double g = Math.sqrt(r1 * r2);
            assertEquals(g, rowMax(out[0].weight(), i), 1e-5 * g);
            assertEquals(g, columnMax(out[1].weight(), i), 1e-5 * g);
        }
    }

    @Test
    void convergesOnAChainAndLowersPerTensorQuantizationError() {
        // Common practice (and the paper's claim): equalized weights lose less under per-tensor quantization.
        Network net = imbalanced(4);
        Equalization.Result r = Equalization.apply(net);
        assertTrue(r.largestLastChange() < 1e-6, "last change " + r.largestLastChange());
        assertTrue(r.sweeps() > 1 && r.sweeps() < 100, "sweeps " + r.sweeps());
        Tensor x = inputs(5, 500, 16);
        Tensor reference = net.forward(x);
        Quantizer q = Quantizer.linear(4).perTensor();
        double before = mse(reference, quantizeWeights(net, q).forward(x));
        double after = mse(reference, quantizeWeights(r.network(), q).forward(x));
        assertTrue(after < 0.5 * before, "output MSE before " + before + ", after " + after);
    }

    static Network quantizeWeights(Network net, Quantizer q) {
        return net.mapLinear(l -> l.withWeight(q.apply(l.weight()).dequantized()));
    }

    static double mse(Tensor a, Tensor b) {
        float[] x = TensorAccess.data(a);
        float[] y = TensorAccess.data(b);
        double s = 0;
        for (int i = 0; i < x.length; i++) {
            s += (x[i] - y[i]) * (double) (x[i] - y[i]);
        }
        return s / x.length;
    }

    private static double rowMax(Tensor w, int row) {
        double m = 0;
        for (int j = 0; j < w.dim(1); j++) {
            m = Math.max(m, Math.abs(w.get(row, j)));
        }
        return m;
    }

    private static double columnMax(Tensor w, int col) {
        double m = 0;
        for (int o = 0; o < w.dim(0); o++) {
            m = Math.max(m, Math.abs(w.get(o, col)));
        }
        return m;
    }
}
