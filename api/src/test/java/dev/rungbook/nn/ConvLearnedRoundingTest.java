package dev.rungbook.nn;

import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.internal.TensorAccess;
import dev.rungbook.quant.Quantizer;
import dev.rungbook.round.Rounding;
import dev.rungbook.tensor.Tensor;
import org.junit.jupiter.api.Test;
import tech.tablesaw.api.Table;

/** Learned rounding of convolution layers inside a network quantization, on their im2col'd calibration inputs. */
class ConvLearnedRoundingTest {
    @Test
    void receptiveFieldRowsTimesTheWeightMatrixAreTheConvolution() {
        // Source: the definition of the convolution as a matrix product over receptive fields; Conv2d.forward is
        // checked against a direct double-precision convolution in LayersTest.
        int[][] cases = {{2, 3, 7, 6, 4, 3, 3, 1, 1}, {3, 2, 8, 9, 5, 3, 2, 2, 2}};
        for (int[] k : cases) {
            Tensor x = LayersTest.random(k[0] * 13L + k[1], k[0], k[1], k[2], k[3]);
            Conv2d c = new Conv2d("c", LayersTest.random(k[4] * 5L, k[4], k[1], k[5], k[6]),
                    LayersTest.random(k[4], k[4]), k[7], k[8]);
            Tensor rows = c.im2colRows(x);
            float[] y = TensorAccess.data(c.forward(x));
            int[] os = c.outputShape(x.shape());
            int p = os[2] * os[3];
            int kk = rows.dim(1);
            assertEquals(k[0] * p, rows.dim(0));
            float[] r = TensorAccess.data(rows);
            float[] w = TensorAccess.data(c.weight());
            for (int n = 0; n < k[0]; n++) {
                for (int o = 0; o < k[4]; o++) {
                    for (int q = 0; q < p; q++) {
                        double s = c.bias().getFlat(o);
                        for (int j = 0; j < kk; j++) {
                            s += (double) r[(n * p + q) * kk + j] * w[o * kk + j];
                        }
                        assertEquals(y[(n * k[4] + o) * p + q], s, 1e-4, "sample " + n + " channel " + o);
                    }
                }
            }
        }
    }

    @Test
    void errorFeedbackAndAdaptiveRoundingOfTheSampleConvNet() {
        // Measured on the folded sample conv net (per-output-channel weights, float activations; 512 calibration
        // tiles, 2000 test tiles). Error-feedback rounding on each layer's captured (im2col'd) inputs, alone MSE on
        // the calibration tiles, nearest -> error feedback:
        //   int4: conv1 0.085 -> 0.018, conv2 0.114 -> 0.015, fc 0.305 -> 0.046; accuracy 0.3615 -> 0.4415;
        //   int3: conv1 1.17 -> 0.051, conv2 1.08 -> 0.130, fc 1.25 -> 0.240; accuracy 0.2445 -> 0.5025.
        // Adaptive rounding (3000 iterations, defaults otherwise) on conv2 alone at int4: 0.114 -> 0.051. (On conv1 the
        // same settings gave 0.217, worse than nearest: not asserted, not tuned here.)
        Network net = ConvEqualizationTest.thermal().foldBatchNorm();
        Dataset cal = Dataset.load(ConvEqualizationTest.SAMPLES.resolve("thermal-calibration.npz"));
        Dataset test = Dataset.load(ConvEqualizationTest.SAMPLES.resolve("thermal-test.npz"));
        for (int bits : new int[] {4, 3}) {
            NetworkQuantization base = NetworkQuantization.of(net).weights(Quantizer.linear(bits)).floatActivations();
            SimulatedNetwork nearest = base.calibrate(cal);
            int[][] captured = new int[3][];
            int[] seen = {0};
            SimulatedNetwork ef = base.learnedRounding(c -> {
                captured[seen[0]++] = new int[] {c.samples(), c.features()};
                return Rounding.errorFeedback(c);
            }).calibrate(cal);
            // conv1 sees 512 tiles x 16 x 16 positions of 1 x 3 x 3 taps, conv2 512 x 8 x 8 of 8 x 3 x 3, fc 512 x 256
            assertArrayEquals(new int[] {512 * 256, 9}, captured[0]);
            assertArrayEquals(new int[] {512 * 64, 72}, captured[1]);
            assertArrayEquals(new int[] {512, 256}, captured[2]);
            Table tn = nearest.layerErrors(cal.inputs());
            Table te = ef.layerErrors(cal.inputs());
            for (int r = 1; r < 4; r++) {
                double n = tn.doubleColumn("alone_mse").get(r);
                double e = te.doubleColumn("alone_mse").get(r);
                assertTrue(e < 0.3 * n, bits + " bits, " + tn.stringColumn("layer").get(r) + ": alone MSE nearest " + n
                        + ", error feedback " + e);
            }
            double accNearest = accuracy(nearest, test);
            double accEf = accuracy(ef, test);
            assertTrue(accEf > accNearest + 0.05, bits + " bits: accuracy " + accNearest + " -> " + accEf);
        }
        NetworkQuantization int4 = NetworkQuantization.of(net).weights(Quantizer.linear(4)).floatActivations();
        double n = int4.calibrate(cal).layerErrors(cal.inputs()).doubleColumn("alone_mse").get(2);
        double a = int4.layer("conv2", l -> l.learnedRounding(c -> Rounding.adaptive(c).iterations(3000)))
                .calibrate(cal).layerErrors(cal.inputs()).doubleColumn("alone_mse").get(2);
        assertTrue(a < 0.7 * n, "conv2 alone MSE nearest " + n + ", adaptive " + a);
    }

    static double accuracy(SimulatedNetwork s, Dataset d) {
        int[] p = Network.topClass(s.forward(d.inputs()));
        int h = 0;
        for (int i = 0; i < p.length; i++) {
            h += p[i] == d.labels()[i] ? 1 : 0;
        }
        return h / (double) p.length;
    }
}
