package dev.rungbook.nn;

import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.internal.TensorAccess;
import dev.rungbook.quant.Quantizer;
import dev.rungbook.range.Range;
import dev.rungbook.range.RangeRule;
import dev.rungbook.round.Calibration;
import dev.rungbook.round.Rounding;
import dev.rungbook.tensor.Tensor;
import java.util.ArrayList;
import java.util.Arrays;
import java.util.List;
import java.util.Map;
import org.junit.jupiter.api.Test;
import tech.tablesaw.api.Table;

class SimulatedNetworkTest {
    /** Asymmetric fake quantization on codes 0..255 with scale {@code s} and zero point {@code z}, by hand. */
    static float[] fakeQuantUint8(float[] v, double s, double z) {
        float[] out = new float[v.length];
        for (int i = 0; i < v.length; i++) {
            double q = Math.max(0, Math.min(255, Math.rint(v[i] / s) + z));
            out[i] = (float) (s * (q - z));
        }
        return out;
    }

    /** Symmetric weights {@code s_r * round(w / s_r)} with one scale per output row, by hand. */
    static float[] perRow(float[] w, int rows, int cols, float[] scales) {
        float[] out = new float[w.length];
        for (int r = 0; r < rows; r++) {
            double s = scales[r];
            for (int c = 0; c < cols; c++) {
                out[r * cols + c] = (float) (s * Math.max(-127, Math.min(127, Math.rint(w[r * cols + c] / s))));
            }
        }
        return out;
    }

    static double[] minMax(float[] v) {
        double lo = Double.POSITIVE_INFINITY;
        double hi = Double.NEGATIVE_INFINITY;
        for (float x : v) {
            lo = Math.min(lo, x);
            hi = Math.max(hi, x);
        }
        return new double[] {lo, hi};
    }

    /** Checks that a calibrated uint8 grid is the min-max one of {@code values}: s = (hi - lo) / 255, z = rint(-lo / s). */
    private static void assertMinMaxGrid(CalibratedActivation a, float[] values) {
        double[] r = minMax(values);
        double lo = Math.min(r[0], 0);
        double hi = Math.max(r[1], 0);
        assertEquals(r[0], a.range().lo(), 0, a.at());
        assertEquals(r[1], a.range().hi(), 0, a.at());
        double s = (hi - lo) / 255;
        assertEquals(s, a.scale(), 1e-6 * s, a.at());
        assertEquals(Math.rint(-lo / s), a.zeroPoint(), 0, a.at());
    }

    /**
     * The default set-up by hand: the grids' scales are checked against the min-max formulas, then the forward pass
     * is recomputed from them (quantize input, per layer: quantized weights, forward, ReLU, quantize output).
     */
    private static float[] byHand(SimulatedNetwork sim, Tensor calibration, Tensor x) {
        CalibratedActivation in = sim.input().orElseThrow();
        assertMinMaxGrid(in, TensorAccess.data(calibration));
        float[] c = fakeQuantUint8(TensorAccess.data(calibration), in.scale(), in.zeroPoint());
        float[] v = fakeQuantUint8(TensorAccess.data(x), in.scale(), in.zeroPoint());
        int nc = calibration.dim(0);
        int nx = x.dim(0);
        double sx = in.scale();
        List<Linear> ls = sim.reference().linearLayers();
        for (int k = 0; k < ls.size(); k++) {
            Linear l = ls.get(k);
            float[] w = TensorAccess.data(l.weight());
            float[] scales = TensorAccess.data(sim.weights(l.name()).orElseThrow().scales());
            for (int r = 0; r < l.outFeatures(); r++) {
                double amax = 0;
                for (int j = 0; j < l.inFeatures(); j++) {
                    amax = Math.max(amax, Math.abs(w[r * l.inFeatures() + j]));
                }
                assertEquals(amax / 127, scales[r], 1e-6 * amax / 127, l.name() + " row " + r);
            }
            // int32 bias on the accumulator grid: S_w,c S_x round(b_c / (S_w,c S_x))
            float[] b = l.bias().toFloatArray();
            for (int r = 0; r < b.length; r++) {
                double acc = (double) scales[r] * sx;
                b[r] = (float) (acc * Math.rint(b[r] / acc));
            }
            Linear q = l.withWeight(Tensor.of(perRow(w, l.outFeatures(), l.inFeatures(), scales), l.outFeatures(),
                    l.inFeatures())).withBias(Tensor.of(b, b.length));
            float[] yc = TensorAccess.data(q.forward(Tensor.of(c, nc, l.inFeatures()))).clone();
            float[] yx = TensorAccess.data(q.forward(Tensor.of(v, nx, l.inFeatures()))).clone();
            if (k + 1 < ls.size()) {
                for (int i = 0; i < yc.length; i++) {
                    yc[i] = Math.max(0f, yc[i]);
                }
                for (int i = 0; i < yx.length; i++) {
                    yx[i] = Math.max(0f, yx[i]);
                }
            }
            CalibratedActivation out = sim.output(l.name()).orElseThrow();
            assertMinMaxGrid(out, yc);
            c = fakeQuantUint8(yc, out.scale(), out.zeroPoint());
            v = fakeQuantUint8(yx, out.scale(), out.zeroPoint());
            sx = out.scale();
        }
        return v;
    }

    @Test
    void defaultSetUpMatchesAHandWrittenFakeQuantPass() {
        // Source: the uniform affine quantization formulas (scale (hi - lo) / 255, zero point round(-lo / s), codes
        // clamp(round(x / s) + z, 0, 255); symmetric weights max|w| / 127 per output channel; the int32 bias of the
        // integer-only scheme, Jacob et al. 2018), written out by hand.
        Network net = Trainer.initialMlp(41, 16, 32, 24, 4);
        Tensor cal = EqualizationTest.inputs(42, 256, 16);
        Tensor x = EqualizationTest.inputs(43, 300, 16);
        SimulatedNetwork sim = NetworkQuantization.of(net).calibrate(cal);
        float[] got = TensorAccess.data(sim.forward(x));
        float[] want = byHand(sim, cal, x);
        double step = sim.output("fc3").orElseThrow().scale();
        int exact = 0;
        for (int i = 0; i < want.length; i++) {
            assertTrue(Math.abs(got[i] - want[i]) <= step * 1.001, "output " + i + ": " + got[i] + " vs " + want[i]);
            exact += Math.abs(got[i] - want[i]) < 1e-6 * step ? 1 : 0;
        }
        assertTrue(exact >= 0.999 * want.length, exact + " of " + want.length + " identical");
        assertEquals(Quantizer.linear(8), sim.weights("fc1").orElseThrow().spec());
    }

    @Test
    void floatSetUpIsTheFloatNetwork() {
        Network net = Trainer.initialMlp(44, 8, 12, 3);
        SimulatedNetwork sim = NetworkQuantization.of(net).floatWeights().floatActivations()
                .calibrate(EqualizationTest.inputs(45, 64, 8));
        Tensor x = EqualizationTest.inputs(46, 50, 8);
        assertArrayEquals(TensorAccess.data(net.forward(x)), TensorAccess.data(sim.forward(x)));
        assertTrue(sim.input().isEmpty());
    }

    @Test
    void percentileAndRunningRangesAreThoseOfTheStackedCalibrationOutputs() {
        Network net = Trainer.initialMlp(47, 8, 12, 3);
        Tensor cal = EqualizationTest.inputs(48, 200, 8);
        SimulatedNetwork p = NetworkQuantization.of(net).floatWeights().floatInput()
                .activationRange(RangeRule.percentile(99)).calibrate(cal);
        float[] h = TensorAccess.data(new Relu("r").forward(net.linearLayers().get(0).forward(cal))).clone();
        Arrays.sort(h);
        // Source: NumPy's default "linear" percentile: position (n - 1) p / 100, interpolated between order stats.
        Range r = p.output("fc1").orElseThrow().range();
        assertEquals(interpolated(h, 0.99), r.hi(), 1e-6);
        assertEquals(interpolated(h, 0.01), r.lo(), 1e-6);

        // Running average over batches of 50 rows: m1 = batch 1, m_t = 0.9 m_(t-1) + 0.1 batch t (by hand).
        SimulatedNetwork run = NetworkQuantization.of(net).floatWeights().floatInput()
                .activationRange(RangeRule.running(0.9, 50)).calibrate(cal);
        float[] y = TensorAccess.data(net.linearLayers().get(0).forward(cal));
        double lo = 0;
        double hi = 0;
        for (int b = 0; b < 4; b++) {
            double blo = Double.POSITIVE_INFINITY;
            double bhi = Double.NEGATIVE_INFINITY;
            for (int i = b * 50 * 12; i < (b + 1) * 50 * 12; i++) {
                float v = Math.max(0f, y[i]);
                blo = Math.min(blo, v);
                bhi = Math.max(bhi, v);
            }
            lo = b == 0 ? blo : 0.9 * lo + 0.1 * blo;
            hi = b == 0 ? bhi : 0.9 * hi + 0.1 * bhi;
        }
        Range rr = run.output("fc1").orElseThrow().range();
        assertEquals(lo, rr.lo(), 1e-6);
        assertEquals(hi, rr.hi(), 1e-5);
        // a rule that clips: the fixed quantizer clips the same way at inference
        double s = run.output("fc1").orElseThrow().scale();
        assertEquals((Math.max(hi, 0) - Math.min(lo, 0)) / 255, s, 1e-6 * s);
    }

    private static double interpolated(float[] sorted, double q) {
        double pos = (sorted.length - 1) * q;
        int i = (int) Math.floor(pos);
        double f = pos - i;
        return i + 1 < sorted.length ? sorted[i] + f * (sorted[i + 1] - sorted[i]) : sorted[i];
    }

    @Test
    void mseAndEntropyRulesCalibrate() {
        Network net = Trainer.initialMlp(49, 16, 64, 4);
        Tensor cal = EqualizationTest.inputs(50, 512, 16);
        for (RangeRule rule : List.of(RangeRule.mse(), RangeRule.entropy())) {
            // entropy calibration needs 4096 values per tensor: the 4-wide logits of 512 samples are too few for it
            SimulatedNetwork sim = NetworkQuantization.of(net).activationRange(rule)
                    .layer("fc2", l -> l.activationRange(RangeRule.minMax())).calibrate(cal);
            Range r = sim.output("fc1").orElseThrow().range();
            double max = minMax(TensorAccess.data(new Relu("r").forward(
                    sim.quantizedWeights().linearLayers().get(0).forward(sim.input().orElseThrow().apply(cal)))))[1];
            // Both rules clip: the chosen upper end lies in (0, max].
            assertTrue(r.hi() > 0 && r.hi() <= max * (1 + 1e-6), rule + ": " + r + " vs max " + max);
            assertTrue(sim.setup().layer("fc1").activationLabel().endsWith(rule.label()));
        }
    }

    @Test
    void learnedRoundingGetsTheLayersCalibrationInputs() {
        Network net = Trainer.initialMlp(51, 16, 32, 4);
        Tensor cal = EqualizationTest.inputs(52, 256, 16);
        List<Calibration> seen = new ArrayList<>();
        SimulatedNetwork sim = NetworkQuantization.of(net).weights(Quantizer.linear(3))
                .learnedRounding(c -> {
                    seen.add(c);
                    return Rounding.errorFeedback(c);
                })
                .calibrate(cal);
        assertEquals(2, seen.size());
        // fc1 reads the quantized input; fc2 reads fc1's quantized ReLU output.
        assertArrayEquals(TensorAccess.data(sim.input().orElseThrow().apply(cal)),
                TensorAccess.data(seen.get(0).inputs()));
        assertEquals(Calibration.Activation.RELU, seen.get(0).activation());
        assertEquals(Calibration.Activation.IDENTITY, seen.get(1).activation());
        assertEquals(net.linearLayers().get(0).bias(), seen.get(0).bias().orElseThrow());
        assertEquals(32, seen.get(1).features());
        // Error feedback lowers fc1's output error against nearest rounding at 3 bits (its published purpose).
        SimulatedNetwork nearest = NetworkQuantization.of(net).weights(Quantizer.linear(3)).floatActivations()
                .calibrate(cal);
        SimulatedNetwork learned = NetworkQuantization.of(net).weights(Quantizer.linear(3)).floatActivations()
                .learnedRounding(Rounding::errorFeedback).calibrate(cal);
        double en = nearest.layerErrors(cal).doubleColumn("alone_mse").get(1);
        double el = learned.layerErrors(cal).doubleColumn("alone_mse").get(1);
        assertTrue(el < en, "error feedback " + el + " vs nearest " + en);
        assertTrue(learned.setup().layer("fc1").weightLabel().contains("learned rounding"));
    }

    @Test
    void adaptiveRoundingRunsPerLayerOnCapturedInputs() {
        // Source: AdaRound's objective is the layer's output error on its calibration inputs (Nagel et al. 2020);
        // learned on the captured inputs, it should not do worse there than rounding to nearest (it starts from it).
        Network net = Trainer.initialMlp(56, 8, 16, 3);
        Tensor cal = EqualizationTest.inputs(57, 128, 8);
        NetworkQuantization base = NetworkQuantization.of(net).weights(Quantizer.linear(3)).floatActivations()
                .floatInput();
        SimulatedNetwork nearest = base.calibrate(cal);
        SimulatedNetwork learned = base.layer("fc1", l -> l.learnedRounding(
                c -> Rounding.adaptive(c).iterations(300).seed(3))).calibrate(cal);
        double en = nearest.layerErrors(cal).doubleColumn("alone_mse").get(1);
        double el = learned.layerErrors(cal).doubleColumn("alone_mse").get(1);
        assertTrue(el <= en * 1.0001, "adaptive " + el + " vs nearest " + en);
        assertTrue(learned.weights("fc1").orElseThrow().spec().rounding().label().startsWith("adaptive("));
        assertEquals(Rounding.nearest(), learned.weights("fc2").orElseThrow().spec().rounding());
    }

    @Test
    void perLayerWeightQuantizersFromAMap() {
        Network net = Trainer.initialMlp(53, 8, 12, 10, 3);
        NetworkQuantization q = NetworkQuantization.of(net)
                .weightQuantizers(Map.of("fc1", Quantizer.linear(4), "fc3", Quantizer.ternary()));
        assertEquals(Quantizer.linear(4), q.layer("fc1").weights().orElseThrow());
        assertEquals(Quantizer.linear(8), q.layer("fc2").weights().orElseThrow());
        assertEquals(Quantizer.ternary(), q.layer("fc3").weights().orElseThrow());
        SimulatedNetwork sim = q.calibrate(EqualizationTest.inputs(54, 64, 8));
        assertEquals(2, sim.weights("fc3").orElseThrow().codes().bits());
        assertEquals(4, sim.weights("fc1").orElseThrow().codes().bits());
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                () -> q.weightQuantizers(Map.of("fc9", Quantizer.linear(4))));
        assertTrue(e.getMessage().contains("fc9") && e.getMessage().contains("fc1"), e.getMessage());
        Table t = q.table();
        assertEquals(4, t.rowCount());
        assertEquals("int4 sym per-channel(0)", t.stringColumn("weights").get(1));
    }

    @Test
    void convolutionalNetworksJoinThroughWeightedLayer() {
        // Common practice: int8 per-channel weights and per-tensor activations keep a small conv net's output SQNR
        // well above 20 dB.
        Network net = LayersTest.convNet(40).foldBatchNorm();
        Tensor cal = Tensor.of(dev.rungbook.testing.Fixtures.gaussian(81, 128 * 2 * 8 * 8), 128, 2, 8, 8);
        Tensor x = Tensor.of(dev.rungbook.testing.Fixtures.gaussian(82, 64 * 2 * 8 * 8), 64, 2, 8, 8);
        SimulatedNetwork sim = NetworkQuantization.of(net).calibrate(cal);
        assertEquals(List.of("conv1", "conv2", "fc"), sim.layerNames());
        Table t = sim.layerErrors(x);
        assertEquals(List.of("input", "conv1", "conv2", "fc"), t.stringColumn("layer").asList());
        double sqnr = t.doubleColumn("cumulative_sqnr_db").get(3);
        assertTrue(sqnr > 20, "conv net int8 output SQNR " + sqnr);
        assertEquals(LayerErrorsTest.direct(net.forward(x), sim.forward(x))[1], sqnr, 1e-9 * sqnr);
        // unfolded batch norms run in float inside the stage of the layer before them
        SimulatedNetwork unfolded = NetworkQuantization.of(LayersTest.convNet(40)).floatWeights().floatActivations()
                .calibrate(cal);
        assertArrayEquals(TensorAccess.data(LayersTest.convNet(40).forward(x)),
                TensorAccess.data(unfolded.forward(x)));
        // learned rounding sees a convolution weight as [out, in*kh*kw]: granularities on other axes are refused
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                () -> NetworkQuantization.of(net).weights(Quantizer.linear(4).perChannel(1))
                        .learnedRounding(Rounding::errorFeedback).calibrate(cal));
        assertTrue(e.getMessage().startsWith("conv1: learned rounding quantizes a convolution weight"),
                e.getMessage());
        assertEquals(Quantizer.linear(4), NetworkQuantization.of(net)
                .weightQuantizers(Map.of("conv2", Quantizer.linear(4))).calibrate(cal).weights("conv2").orElseThrow()
                .spec());
    }

    @Test
    void refusesActivationQuantizersThatCannotBeCalibrated() {
        Network net = Trainer.initialMlp(55, 4, 6, 3);
        NetworkQuantization q = NetworkQuantization.of(net);
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                () -> q.activations(Quantizer.linear(8).perChannel(1)));
        assertTrue(e.getMessage().contains("per tensor"), e.getMessage());
        assertThrows(IllegalArgumentException.class, () -> q.activations(Quantizer.binary()));
        assertThrows(IllegalArgumentException.class, () -> q.layer("relu1", l -> l));
        Tensor bad = Tensor.of(new float[] {1, 2, 3}, 1, 3);
        assertThrows(IllegalArgumentException.class, () -> q.calibrate(bad));
    }
}
