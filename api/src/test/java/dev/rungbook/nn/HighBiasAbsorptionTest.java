package dev.rungbook.nn;

import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.internal.TensorAccess;
import dev.rungbook.tensor.Tensor;
import java.util.Random;
import org.junit.jupiter.api.Test;

/** High-bias absorption from batch-norm statistics. */
class HighBiasAbsorptionTest {
    @Test
    void absorbsThreeSigmaBelowTheMeanWorkedByHand() {
        // Source: the paper's rule c = max(0, beta - 3 gamma), b1 <- b1 - c, b2 <- b2 + W2 c, worked by hand.
        // bn: beta [5, 0.5], gamma [1, 1] -> c = [2, 0]; fc2 weight [[2, -1]] -> b2 = 0.5 + 2 * 2 = 4.5.
        Linear fc1 = new Linear("fc1", Tensor.of(new float[] {1, 0, 0, 1}, 2, 2), Tensor.of(new float[] {0, 0}, 2));
        BatchNorm bn = new BatchNorm("bn", Tensor.of(new float[] {1, 1}, 2), Tensor.of(new float[] {5, 0.5f}, 2),
                Tensor.of(new float[] {0, 0}, 2), Tensor.of(new float[] {1, 1}, 2), 1e-5);
        Linear fc2 = new Linear("fc2", Tensor.of(new float[] {2, -1}, 1, 2), Tensor.of(new float[] {0.5f}, 1));
        Network ref = Network.of(fc1, bn, new Relu("r"), fc2);
        Network folded = ref.foldBatchNorm();
        Network out = Equalization.absorbHighBias(ref, folded);
        float[] b1 = folded.weightedLayers().get(0).bias().toFloatArray();
        assertArrayEquals(new float[] {b1[0] - 2, b1[1]}, out.weightedLayers().get(0).bias().toFloatArray(), 1e-6f);
        assertArrayEquals(new float[] {4.5f}, out.weightedLayers().get(1).bias().toFloatArray(), 1e-6f);
        // exact where the pre-activation of channel 0 is at least 2: x0 + 5 >= 2
        Tensor x = Tensor.of(new float[] {-2.9f, 1, 0.3f, -4, 7, 0}, 3, 2);
        assertArrayEquals(folded.forward(x).toFloatArray(), out.forward(x).toFloatArray(), 1e-5f);
    }

    @Test
    void keepsTheFunctionWhereThePreActivationStaysAboveTheBoundAfterEqualization() {
        // Source: relu(z) = relu(z - c) + c for z >= c; with batch-norm statistics measured on the data itself the
        // pre-activation of channel i is about N(beta_i, gamma_i^2), so it falls below c_i = beta_i - 3 gamma_i for
        // about 0.13% of samples per channel (normal tail; the measured share of affected samples is asserted below).
        Random r = new Random(5);
        int in = 6;
        int hidden = 10;
        Linear fc1 = Linear.initial("fc1", in, hidden, 1);
        Tensor x = EqualizationTest.inputs(2, 4000, in);
        float[] z = TensorAccess.data(fc1.forward(x));
        float[] mean = new float[hidden];
        float[] var = new float[hidden];
        for (int s = 0; s < 4000; s++) {
            for (int i = 0; i < hidden; i++) {
                mean[i] += z[s * hidden + i] / 4000f;
            }
        }
        for (int s = 0; s < 4000; s++) {
            for (int i = 0; i < hidden; i++) {
                var[i] += (z[s * hidden + i] - mean[i]) * (z[s * hidden + i] - mean[i]) / 4000f;
            }
        }
        float[] beta = new float[hidden];
        float[] gamma = new float[hidden];
        for (int i = 0; i < hidden; i++) {
            beta[i] = (float) (6 * r.nextDouble());
            gamma[i] = (float) (0.5 + r.nextDouble());
        }
        BatchNorm bn = new BatchNorm("bn", Tensor.of(gamma, hidden), Tensor.of(beta, hidden), Tensor.of(mean, hidden),
                Tensor.of(var, hidden), 1e-5);
        Network ref = Network.of(fc1, bn, new Relu("r"), Linear.initial("fc2", hidden, 3, 3));
        Network eq = Equalization.apply(ref.foldBatchNorm()).network();
        Network out = Equalization.absorbHighBias(ref, eq);
        int moved = 0;
        for (int i = 0; i < hidden; i++) {
            double before = eq.weightedLayers().get(0).bias().getFlat(i);
            double after = out.weightedLayers().get(0).bias().getFlat(i);
            assertEquals(beta[i] > 3 * gamma[i], after < before - 1e-4, "channel " + i);
            moved += after < before ? 1 : 0;
        }
        assertTrue(moved >= 2, "channels with beta > 3 gamma: " + moved);
        // outputs agree on the samples whose every pre-activation stays above its bound
        float[] pre = TensorAccess.data(out.weightedLayers().get(0).forward(x));
        float[] a = TensorAccess.data(eq.forward(x));
        float[] b = TensorAccess.data(out.forward(x));
        int kept = 0;
        double scale = 0;
        double worst = 0;
        for (int s = 0; s < 4000; s++) {
            boolean inside = true;
            for (int i = 0; i < hidden; i++) {
                double c = eq.weightedLayers().get(0).bias().getFlat(i) - out.weightedLayers().get(0).bias().getFlat(i);
                inside &= c == 0 || pre[s * hidden + i] >= 0;
            }
            if (inside) {
                kept++;
                for (int o = 0; o < 3; o++) {
                    scale = Math.max(scale, Math.abs(a[s * 3 + o]));
                    worst = Math.max(worst, Math.abs(a[s * 3 + o] - b[s * 3 + o]));
                }
            }
        }
        assertTrue(kept > 0.97 * 4000, "samples above every bound: " + kept);
        assertTrue(worst < 1e-5 * scale, "largest difference " + worst + " of " + scale);
    }

    @Test
    void leavesTheSampleConvNetAloneWhereNoChannelHasAHighBias() {
        // Measured: no channel of bn1 or bn2 of the sample thermal net has beta > 3 |gamma| (beta about 0, gamma
        // about 1), so the rule moves nothing.
        Network ref = ConvEqualizationTest.thermal();
        Network eq = Equalization.apply(ref.foldBatchNorm()).network();
        Network out = Equalization.absorbHighBias(ref, eq);
        for (int l = 0; l < 3; l++) {
            assertArrayEquals(eq.weightedLayers().get(l).bias().toFloatArray(),
                    out.weightedLayers().get(l).bias().toFloatArray(), 0f);
        }
    }
}
