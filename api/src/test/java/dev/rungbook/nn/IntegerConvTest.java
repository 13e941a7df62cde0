package dev.rungbook.nn;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.tensor.Tensor;
import java.nio.file.Path;
import org.junit.jupiter.api.Test;

/** Integer-only execution of convolution networks: im2col on codes, max pooling and flatten on codes, ReLU6. */
class IntegerConvTest {
    static final Path SAMPLES = Path.of("..", "sample-tensors");

    @Test
    void sampleConvNetRunsOnIntegersAndAgreesWithItsSimulation() {
        // Source: the integer-only scheme (Jacob et al. 2018, check-values.md section 9), as in IntegerAgreementTest:
        // with the simulation's grids and int32 bias, only the fixed-point requantization differs, and max pooling
        // and flatten commute with a monotone quantizer. The simulation's convolutions are the float Conv2d (its own
        // im2col and matrix product), an independent path to the integer one.
        Network net = ConvEqualizationTest.thermal().foldBatchNorm();
        Dataset cal = Dataset.load(SAMPLES.resolve("thermal-calibration.npz"));
        Dataset test = Dataset.load(SAMPLES.resolve("thermal-test.npz"));
        SimulatedNetwork sim = NetworkQuantization.of(net).calibrate(cal);
        IntegerNetwork in = IntegerNetwork.of(sim).requantization(IntegerNetwork.Requantization.SINGLE_ROUNDING);
        double[] single = IntegerAgreementTest.agreement(in.forwardCodes(test.inputs()),
                IntegerAgreementTest.simulatedCodes(sim, test.inputs()));
        assertTrue(single[1] >= 0.999, "single rounding, within 1 LSB: " + single[1]);
        IntegerNetwork published = IntegerNetwork.of(sim);
        double[] dbl = IntegerAgreementTest.agreement(published.forwardCodes(test.inputs()),
                IntegerAgreementTest.simulatedCodes(sim, test.inputs()));
        assertTrue(dbl[1] >= 0.999, "double rounding, within 1 LSB: " + dbl[1]);
        // Common practice: int8 post-training quantization of a small conv net keeps its accuracy within a point.
        double floatAccuracy = net.accuracy(test);
        double integerAccuracy = published.accuracy(test);
        assertTrue(Math.abs(integerAccuracy - floatAccuracy) < 0.01,
                "integer " + integerAccuracy + " vs float " + floatAccuracy);
        String text = published.toString();
        assertTrue(text.contains("conv1 conv 1x3x3") && text.contains("ReLU (folded into clamp)")
                && text.contains("MaxPool") && text.contains("Flatten"), text);
    }

    @Test
    void ownCalibrationRunsTheSampleConvNet() {
        // Source: as above, IntegerNetwork.simulate (real multipliers in double) against the fixed-point codes.
        Network net = ConvEqualizationTest.thermal().foldBatchNorm();
        Dataset cal = Dataset.load(SAMPLES.resolve("thermal-calibration.npz"));
        Dataset test = Dataset.load(SAMPLES.resolve("thermal-test.npz"));
        IntegerNetwork in = IntegerNetwork.of(net, cal.inputs(), 8);
        double[] r = IntegerAgreementTest.agreement(in.forwardCodes(test.inputs()), in.simulate(test.inputs()));
        assertTrue(r[1] >= 0.999, "within 1 LSB: " + r[1]);
        assertEquals(test.inputs().dim(0) * 4, in.forward(test.inputs()).size(), "one logit per class and tile");
        assertTrue(in.accuracy(test) > net.accuracy(test) - 0.02, in.accuracy(test) + " vs " + net.accuracy(test));
    }

    @Test
    void paddedStridedConvolutionMatchesItsSimulation() {
        // Source: the definition of the cross-correlation with zero padding (Conv2d's float forward, which the
        // simulation runs): padding with the input zero point is padding with the real value 0.
        Conv2d c = new Conv2d("c", LayersTest.random(41, 3, 2, 3, 3), LayersTest.random(42, 3), 2, 1);
        Network net = Network.of(c, new Relu6("r6"), new Flatten("f"),
                new Linear("fc", LayersTest.random(43, 2, 3 * 4 * 4), LayersTest.random(44, 2)));
        Tensor x = scaled(LayersTest.random(45, 400, 2, 7, 8), 3f);
        SimulatedNetwork sim = NetworkQuantization.of(net).calibrate(x);
        IntegerNetwork in = IntegerNetwork.of(sim).requantization(IntegerNetwork.Requantization.SINGLE_ROUNDING);
        Tensor y = scaled(LayersTest.random(46, 300, 2, 7, 8), 3f);
        double[] r = IntegerAgreementTest.agreement(in.forwardCodes(y), IntegerAgreementTest.simulatedCodes(sim, y));
        assertTrue(r[1] >= 0.999, "within 1 LSB: " + r[1]);
        assertTrue(in.toString().contains("ReLU6 (folded into clamp)"), in.toString());
    }

    @Test
    void relu6ClampsAtTheCodeOfSix() {
        // Source: ReLU6's definition, min(max(0, x), 6): no output code may exceed the grid's code of 6, and inputs
        // far above 6 reach it.
        Linear fc = new Linear("fc", Tensor.of(new float[] {4f, -4f}, 2, 1), Tensor.of(new float[] {0f, 0f}, 2));
        Network net = Network.of(fc, new Relu6("r6"));
        float[] v = new float[200];
        for (int i = 0; i < v.length; i++) {
            v[i] = -5f + 10f * i / (v.length - 1);
        }
        Tensor x = Tensor.of(v, v.length, 1);
        IntegerNetwork in = IntegerNetwork.of(net, x, 8);
        float[] out = in.forward(x).toFloatArray();
        float top = 0;
        for (float o : out) {
            top = Math.max(top, o);
            assertTrue(o >= 0, "ReLU floor: " + o);
        }
        // the calibrated range is [0, 6] (ReLU6 outputs), so the code of 6 is the top code, dequantized to 6
        assertEquals(6.0, top, 1e-6);
        assertEquals(0.0, out[0], 0.0);
    }

    @Test
    void refusesWhatDoesNotRunOnCodesNamingTheLayer() {
        Network unfolded = ConvEqualizationTest.thermal();
        Dataset cal = Dataset.load(SAMPLES.resolve("thermal-calibration.npz"));
        IllegalArgumentException bn = assertThrows(IllegalArgumentException.class,
                () -> IntegerNetwork.of(unfolded, cal.inputs(), 8));
        assertTrue(bn.getMessage().contains("bn1") && bn.getMessage().contains("foldBatchNorm"), bn.getMessage());
        Conv2d c = new Conv2d("c", LayersTest.random(51, 2, 1, 3, 3), LayersTest.random(52, 2), 1, 1);
        Network avg = Network.of(c, new Relu("r"), Pool2d.average("avg", 2, 2), new Flatten("f"),
                new Linear("fc", LayersTest.random(53, 2, 2 * 4 * 4), LayersTest.random(54, 2)));
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                () -> IntegerNetwork.of(avg, LayersTest.random(55, 8, 1, 8, 8), 8));
        assertTrue(e.getMessage().contains("avg") && e.getMessage().contains("average pooling"), e.getMessage());
        IntegerNetwork ok = IntegerNetwork.of(Network.of(c, new Relu("r")), LayersTest.random(55, 8, 1, 8, 8), 8);
        IllegalArgumentException shape = assertThrows(IllegalArgumentException.class,
                () -> ok.forwardCodes(LayersTest.random(56, 4, 3, 8, 8)));
        assertTrue(shape.getMessage().contains("c reads [N, 1, H, W]"), shape.getMessage());
    }

    private static Tensor scaled(Tensor t, float f) {
        float[] v = t.toFloatArray();
        for (int i = 0; i < v.length; i++) {
            v[i] *= f;
        }
        return Tensor.of(v, t.shape());
    }
}
