package dev.rungbook.nn;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.internal.TensorAccess;
import dev.rungbook.quant.Quantizer;
import dev.rungbook.round.Rounding;
import dev.rungbook.tensor.Tensor;
import java.nio.file.Path;
import org.junit.jupiter.api.Test;

class IntegerAgreementTest {
    static final Path SAMPLES = Path.of("..", "sample-tensors");

    static Network conveyor() {
        return QatTest.sampleMlp();
    }

    /** The simulated network's last-layer codes: round(y / s) + z of its dequantized outputs. */
    static int[] simulatedCodes(SimulatedNetwork sim, Tensor x) {
        CalibratedActivation out = sim.output(sim.layerNames().get(sim.layerNames().size() - 1)).orElseThrow();
        float[] y = TensorAccess.data(sim.forward(x));
        int[] q = new int[y.length];
        for (int i = 0; i < y.length; i++) {
            q[i] = (int) Math.rint(y[i] / out.scale() + out.zeroPoint());
        }
        return q;
    }

    /** {share exact, share within 1 LSB, max difference}. */
    static double[] agreement(int[] a, int[] b) {
        int exact = 0;
        int within = 0;
        int max = 0;
        for (int i = 0; i < a.length; i++) {
            int d = Math.abs(a[i] - b[i]);
            exact += d == 0 ? 1 : 0;
            within += d <= 1 ? 1 : 0;
            max = Math.max(max, d);
        }
        return new double[] {exact / (double) a.length, within / (double) a.length, max};
    }

    private static double[] run(SimulatedNetwork sim, Tensor x, IntegerNetwork.Requantization mode) {
        IntegerNetwork in = IntegerNetwork.of(sim).requantization(mode);
        return agreement(in.forwardCodes(x), simulatedCodes(sim, x));
    }

    @Test
    void integerNetworkAgreesWithTheSimulatedNetworkItWasMadeFrom() {
        // Source: the integer-only scheme (Jacob et al. 2018, check-values.md section 9): with the same grids and the
        // int32 bias simulated, the integer network differs from the float simulation only by the fixed-point
        // requantization, below one output step per layer.
        Network small = Trainer.initialMlp(11, 16, 32, 24, 4);
        SimulatedNetwork s1 = NetworkQuantization.of(small).calibrate(EqualizationTest.inputs(12, 512, 16));
        Tensor x1 = EqualizationTest.inputs(13, 2000, 16);
        double[] r = run(s1, x1, IntegerNetwork.Requantization.DOUBLE_ROUNDING);
        assertTrue(r[1] >= 0.999, "within 1 LSB: " + r[1]);
        Network skewed = EqualizationTest.imbalanced(11);
        SimulatedNetwork s2 = NetworkQuantization.of(skewed).calibrate(EqualizationTest.inputs(12, 512, 16));
        double[] s = run(s2, EqualizationTest.inputs(13, 1000, 16), IntegerNetwork.Requantization.DOUBLE_ROUNDING);
        assertTrue(s[1] >= 0.999, "imbalanced, within 1 LSB: " + s[1]);
    }

    @Test
    void singleRoundingRequantizationAgreesOnTheImbalancedSampleNetwork() {
        // Observed: on the sample network (fc1's channel ranges differ by nearly 1000x), fc2's multipliers are near 1
        // (shift n = 1 or 2), where the published double rounding is one off round(acc * M) for about 7% of fc2's
        // outputs; fc3 amplifies those steps, and only about 99.8% of the final codes stay within 1 LSB. A single
        // rounding of the 64-bit product removes that source: then the integer network reproduces the simulation.
        Network conveyor = conveyor();
        Dataset cal = Dataset.load(SAMPLES.resolve("conveyor-calibration.npz"));
        Dataset val = Dataset.load(SAMPLES.resolve("conveyor-validation.npz"));
        SimulatedNetwork sim = NetworkQuantization.of(conveyor).calibrate(cal);
        double[] published = run(sim, val.inputs(), IntegerNetwork.Requantization.DOUBLE_ROUNDING);
        double[] single = run(sim, val.inputs(), IntegerNetwork.Requantization.SINGLE_ROUNDING);
        assertTrue(published[1] >= 0.99 && published[1] < 0.999, "double rounding within 1 LSB: " + published[1]);
        assertTrue(single[1] >= 0.999, "single rounding within 1 LSB: " + single[1]);
        assertTrue(single[0] >= 0.999, "single rounding exact: " + single[0]);
        // Without the int32 bias in the simulation, the bias rounding (up to M/2 output steps) adds mismatches.
        SimulatedNetwork floatBias = NetworkQuantization.of(conveyor).integerBias(false).calibrate(cal);
        double[] fb = run(floatBias, val.inputs(), IntegerNetwork.Requantization.SINGLE_ROUNDING);
        assertTrue(fb[0] < single[0], "float bias exact " + fb[0] + " vs " + single[0]);
        assertEquals(IntegerNetwork.Requantization.DOUBLE_ROUNDING, IntegerNetwork.of(sim).requantization());
    }

    @Test
    void refusesGridsThatIntegerExecutionDoesNotRun() {
        Network net = Trainer.initialMlp(14, 8, 12, 3);
        Tensor cal = EqualizationTest.inputs(15, 64, 8);
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                () -> IntegerNetwork.of(NetworkQuantization.of(net).weights(Quantizer.nf4()).calibrate(cal)));
        assertTrue(e.getMessage().contains("fc1") && e.getMessage().contains("nf4"), e.getMessage());
        assertThrows(IllegalArgumentException.class,
                () -> IntegerNetwork.of(NetworkQuantization.of(net).floatInput().calibrate(cal)));
        // learned rounding is fine: the codes are taken over
        SimulatedNetwork learned = NetworkQuantization.of(net).learnedRounding(Rounding::errorFeedback).calibrate(cal);
        double[] r = run(learned, EqualizationTest.inputs(16, 500, 8), IntegerNetwork.Requantization.SINGLE_ROUNDING);
        assertTrue(r[1] >= 0.999, "learned rounding, within 1 LSB: " + r[1]);
    }
}
