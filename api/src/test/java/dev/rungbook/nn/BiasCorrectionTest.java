package dev.rungbook.nn;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.internal.TensorAccess;
import dev.rungbook.quant.Quantizer;
import dev.rungbook.tensor.Tensor;
import org.apache.commons.math3.analysis.integration.SimpsonIntegrator;
import org.apache.commons.math3.distribution.NormalDistribution;
import org.junit.jupiter.api.Test;

class BiasCorrectionTest {
    @Test
    void expectedReluOfNormalMatchesPublishedVectors() {
        // Source: check-values.md §8 (E[x] after BN + ReLU, computed): (0.5, 1) -> 0.697797; (-1, 2) -> 0.395593;
        // (0, 1) -> 0.398942.
        assertEquals(0.697797, BiasCorrection.expectedReluOfNormal(0.5, 1), 1e-6);
        assertEquals(0.395593, BiasCorrection.expectedReluOfNormal(-1, 2), 1e-6);
        assertEquals(0.398942, BiasCorrection.expectedReluOfNormal(0, 1), 1e-6);
        assertEquals(3.0, BiasCorrection.expectedReluOfNormal(3, 0), 0.0);
        assertThrows(IllegalArgumentException.class, () -> BiasCorrection.expectedReluOfNormal(0, -1));
    }

    @Test
    void expectedReluOfNormalMatchesNumericalIntegration() {
        // Reference: commons-math3 NormalDistribution density integrated with SimpsonIntegrator over [0, mean+12sd].
        SimpsonIntegrator simpson = new SimpsonIntegrator(1e-10, 1e-10, 3, 30);
        double[][] cases = {{0.3, 0.7}, {-2, 1.5}, {1.7, 0.2}, {-0.4, 3}};
        for (double[] c : cases) {
            NormalDistribution n = new NormalDistribution(c[0], c[1]);
            double upper = Math.max(0, c[0]) + 12 * c[1];
            double integral = simpson.integrate(1_000_000, z -> z * n.density(z), 0, upper);
            assertEquals(integral, BiasCorrection.expectedReluOfNormal(c[0], c[1]), 1e-7, "beta " + c[0]);
        }
    }

    @Test
    void empiricalCorrectionRemovesEachLayersMeanOutputError() {
        // Source: the bias-correction identity E[(W~ - W) x] = (W~ - W) E[x]; on the calibration batch itself the
        // mean error of the first layer's output is therefore zero up to float rounding.
        Network net = EqualizationTest.imbalanced(7);
        Network q = EqualizationTest.quantizeWeights(net, Quantizer.linear(3).perTensor());
        Tensor x = EqualizationTest.inputs(8, 1000, 16);
        Network corrected = BiasCorrection.empirical(net, q, x);
        Layer first = net.layers().get(0);
        double before = largestMeanChannelError(first.forward(x), q.layers().get(0).forward(x));
        double after = largestMeanChannelError(first.forward(x), corrected.layers().get(0).forward(x));
        assertTrue(after < 1e-4 * Math.max(1, before) && after < before, "before " + before + ", after " + after);
        // Every later layer: on its own (quantized-network) input, its mean output error per channel is zero too.
        Tensor xq = x;
        for (int i = 0; i < corrected.layers().size(); i++) {
            Layer c = corrected.layers().get(i);
            if (c instanceof Linear) {
                double own = largestMeanChannelError(net.layers().get(i).forward(xq), c.forward(xq));
                double uncorrected = largestMeanChannelError(net.layers().get(i).forward(xq),
                        q.layers().get(i).forward(xq));
                assertTrue(own < 1e-3 * Math.max(1e-3, uncorrected), "layer " + i + ": " + own + " vs " + uncorrected);
            }
            xq = c.forward(xq);
        }
    }

    private static double largestMeanChannelError(Tensor ref, Tensor got) {
        float[] a = TensorAccess.data(ref);
        float[] b = TensorAccess.data(got);
        int n = ref.dim(0);
        int c = ref.dim(1);
        double worst = 0;
        for (int j = 0; j < c; j++) {
            double s = 0;
            for (int i = 0; i < n; i++) {
                s += b[i * c + j] - a[i * c + j];
            }
            worst = Math.max(worst, Math.abs(s / n));
        }
        return worst;
    }
}
