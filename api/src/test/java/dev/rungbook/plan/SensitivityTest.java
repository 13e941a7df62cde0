package dev.rungbook.plan;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertFalse;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.internal.TensorAccess;
import dev.rungbook.nn.Dataset;
import dev.rungbook.nn.Network;
import dev.rungbook.progress.OperationInterruptedException;
import dev.rungbook.quant.Quantizer;
import dev.rungbook.tensor.Tensor;
import java.util.List;
import dev.rungbook.testing.Fixtures;
import org.junit.jupiter.api.Assumptions;
import org.junit.jupiter.api.Test;
import org.knowm.xchart.HeatMapChart;
import tech.tablesaw.api.Row;
import tech.tablesaw.api.Table;

class SensitivityTest {
    @Test
    void klDivergenceOfSoftmaxMatchesAWorkedExample() {
        // Source: worked by hand. softmax(0, 0) = (1/2, 1/2), softmax(0, ln 3) = (1/4, 3/4);
        // KL = 1/2 ln(2) + 1/2 ln(2/3) = 0.5 * (0.693147 - 0.405465) = 0.143841.
        float ln3 = (float) Math.log(3);
        assertEquals(0.143841, Outputs.klDivergence(new float[] {0, 0}, new float[] {0, ln3}, 1, 2), 1e-6);
        // Shifting every logit of a row leaves softmax unchanged, also for logits that would overflow exp.
        assertEquals(0.143841, Outputs.klDivergence(new float[] {1000, 1000}, new float[] {-500, -500 + ln3}, 1, 2),
                1e-5);
        // Mean over rows: a second, identical row contributes 0.
        assertEquals(0.143841 / 2, Outputs.klDivergence(new float[] {0, 0, 3, 1}, new float[] {0, ln3, 3, 1}, 2, 2),
                1e-6);
    }

    @Test
    void outputErrorsMatchNumpy() throws java.io.IOException {
        // Source: NumPy (python3): mean over rows of sum(p * (log p - log q)) with log-softmax via logaddexp.reduce,
        // mean squared logit difference, and the share of equal argmax.
        String py = Fixtures.pythonWithNumpy();
        Assumptions.assumeTrue(py != null, "python3 with numpy not available");
        int n = 60;
        int k = 5;
        float[] p = Fixtures.gaussian(41, n * k);
        float[] q = Fixtures.gaussian(42, n * k);
        for (int i = 0; i < q.length; i++) {
            p[i] *= 3;
            q[i] = p[i] + 0.8f * q[i];
        }
        Network net = Network.of(new dev.rungbook.nn.Relu("identity-on-positive-inputs"));
        // A network whose output is its input: shift the logits so that the ReLU keeps them all.
        float shift = 100f;
        float[] ps = p.clone();
        float[] qs = q.clone();
        for (int i = 0; i < ps.length; i++) {
            ps[i] += shift;
            qs[i] += shift;
        }
        Outputs.Error e = new Outputs(net, Tensor.of(ps, n, k), null).of(Tensor.of(qs, n, k));
        String script = String.join("\n",
                "import sys, numpy as np",
                "p = np.array([float(v) for v in sys.argv[1].split(',')], dtype=np.float32).reshape(-1, 5)",
                "q = np.array([float(v) for v in sys.argv[2].split(',')], dtype=np.float32).reshape(-1, 5)",
                "p64, q64 = p.astype(np.float64), q.astype(np.float64)",
                "lp = p64 - np.logaddexp.reduce(p64, axis=1, keepdims=True)",
                "lq = q64 - np.logaddexp.reduce(q64, axis=1, keepdims=True)",
                "kl = np.mean(np.sum(np.exp(lp) * (lp - lq), axis=1))",
                "mse = np.mean((q64 - p64) ** 2)",
                "agree = np.mean(np.argmax(p, axis=1) == np.argmax(q, axis=1))",
                "print(repr(float(kl)), repr(float(mse)), repr(float(agree)))");
        String[] got = Fixtures.runPython(py, script, join(ps), join(qs)).trim().split("\\s+");
        assertEquals(Double.parseDouble(got[0]), e.klDivergence(), 1e-9);
        assertEquals(Double.parseDouble(got[1]), e.logitMse(), 1e-9);
        assertEquals(Double.parseDouble(got[2]), e.agreement(), 0.0);
        assertTrue(e.klDivergence() > 0.05, "the test should not be trivial: " + e.klDivergence());
    }

    private static String join(float[] v) {
        StringBuilder b = new StringBuilder();
        for (float x : v) {
            b.append(b.length() == 0 ? "" : ",").append(x);
        }
        return b.toString();
    }

    @Test
    void eachCellEqualsTheNetworkWithThatLayerQuantizedAlone() {
        Network net = PlanFixtures.tinyMlp(11);
        Dataset data = PlanFixtures.tinyData(net, 12, 300);
        List<Candidate> cands = List.of(Candidate.of("int8", Quantizer.linear(8)),
                Candidate.of("int3t", Quantizer.linear(3).perTensor()));
        SensitivityResult s = Sensitivity.of(net, data).candidates(cands).measure();
        assertEquals(List.of("fc1", "fc2", "fc3"), s.layers());
        assertEquals(net.accuracy(data), s.floatAccuracy(), 0.0);
        Table t = s.table();
        assertEquals(SensitivityResult.COLUMNS, t.columnNames());
        assertEquals(6, t.rowCount());
        float[] ref = TensorAccess.data(net.forward(data.inputs()));
        int row = 0;
        for (String layer : s.layers()) {
            for (Candidate c : cands) {
                // Independent path: the whole network with mapWeighted, then Network.accuracy and a plain MSE loop.
                Network q = net.mapWeighted(l -> l.name().equals(layer)
                        ? l.withWeight(c.spec().apply(l.weight()).dequantized()) : l);
                float[] z = TensorAccess.data(q.forward(data.inputs()));
                double se = 0;
                for (int i = 0; i < z.length; i++) {
                    se += ((double) z[i] - ref[i]) * ((double) z[i] - ref[i]);
                }
                Row r = t.row(row++);
                assertEquals(layer, r.getString(SensitivityResult.LAYER));
                assertEquals(c.label(), r.getString(SensitivityResult.CANDIDATE));
                assertEquals(se / z.length, r.getDouble(SensitivityResult.LOGIT_MSE), 1e-12 + 1e-9 * se);
                assertEquals(q.accuracy(data), r.getDouble(SensitivityResult.ACCURACY), 0.0);
                assertEquals(net.accuracy(data) - q.accuracy(data), r.getDouble(SensitivityResult.ACCURACY_DROP),
                        1e-12);
                long bytes = c.spec().apply(net.parameters().get(layer + ".weight")).bytes();
                assertEquals(bytes, r.getLong(SensitivityResult.BYTES));
            }
        }
        // int3 per tensor on fc2 (whose one large weight coarsens the grid) hurts more than int8.
        assertTrue(s.value(Objective.KL_DIVERGENCE, 1, 1) > s.value(Objective.KL_DIVERGENCE, 1, 0));
    }

    @Test
    void bytesFollowTheSizeAccountingOfQuantized() {
        // Source: Quantized's documented size accounting: codes bit-packed, plus one float32 scale per channel for a
        // symmetric per-channel grid. fc2 of the tiny MLP is [12, 16]: int4 = 12*16*4/8 + 12*4 = 144 bytes;
        // int8 = 192 + 48 = 240 bytes.
        Network net = PlanFixtures.tinyMlp(3);
        SensitivityResult s = Sensitivity.of(net, PlanFixtures.tinyData(net, 4, 50).inputs())
                .candidates(Candidate.of("int8", Quantizer.linear(8)), Candidate.of("int4", Quantizer.linear(4)))
                .measure();
        assertEquals(240, s.bytes(1, 0));
        assertEquals(144, s.bytes(1, 1));
        assertFalse(s.hasLabels());
        assertTrue(Double.isNaN(s.floatAccuracy()));
        assertTrue(s.table().doubleColumn(SensitivityResult.ACCURACY).isMissing(0));
        assertThrows(IllegalArgumentException.class, () -> s.value(Objective.ACCURACY_DROP, 0, 0));
    }

    @Test
    void aCandidateThatDoesNotFitIsMarkedAndANetworkWithNoFitIsRefused() {
        Network net = PlanFixtures.tinyMlp(5);
        Tensor x = PlanFixtures.tinyData(net, 6, 40).inputs();
        // Group size 16 along the inputs: fc1 has 8 inputs, fc3 12, fc2 16, so only fc2 fits.
        Candidate g16 = Candidate.of("int4g16", Quantizer.linear(4).perGroup(1, 16));
        SensitivityResult s = Sensitivity.of(net, x).candidates(Candidate.of("int8", Quantizer.linear(8)), g16)
                .measure();
        assertFalse(s.applicable(0, 1));
        assertTrue(s.applicable(1, 1));
        assertEquals(-1, s.bytes(0, 1));
        Table t = s.table();
        assertTrue(t.stringColumn(SensitivityResult.NOTE).get(1).contains("fc1.weight"), t.print());
        assertTrue(t.longColumn(SensitivityResult.BYTES).isMissing(1));
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                () -> Sensitivity.of(net, x).candidates(g16).measure());
        assertTrue(e.getMessage().contains("layer 'fc1'") && e.getMessage().contains("int4g16"), e.getMessage());
        HeatMapChart h = s.heatMap();
        assertTrue(h.getTitle().contains("kl_divergence"), h.getTitle());
        assertTrue(dev.rungbook.chart.Charts.toPngBytes(h, 1).length > 0);
        assertThrows(IllegalArgumentException.class, () -> Sensitivity.of(net, x).candidates(List.of()));
        assertThrows(IllegalArgumentException.class,
                () -> Sensitivity.of(net, x).candidates(Candidate.of("a", Quantizer.linear(8)),
                        Candidate.of("a", Quantizer.linear(4))));
    }

    @Test
    void interruptionStopsTheMeasurement() {
        Network net = PlanFixtures.tinyMlp(7);
        Tensor x = PlanFixtures.tinyData(net, 8, 20).inputs();
        Thread.currentThread().interrupt();
        try {
            assertThrows(OperationInterruptedException.class, () -> Sensitivity.of(net, x).measure());
        } finally {
            Thread.interrupted();
        }
    }

    @Test
    void onTheSampleMlpFewerBitsHurtMoreInEveryLayer() {
        // Common practice, not a published value: with per-channel symmetric grids, the output error grows as the
        // bit width shrinks. The float accuracy is the one the sample generator recorded (0.9710).
        SensitivityResult s = Sensitivity.of(PlanFixtures.sampleMlp(), PlanFixtures.sampleValidation()).measure();
        assertEquals(0.9710, s.floatAccuracy(), 5e-5);
        for (int i = 0; i < s.layers().size(); i++) {
            for (int k = 1; k < s.candidates().size(); k++) {
                assertTrue(s.value(Objective.KL_DIVERGENCE, i, k) > s.value(Objective.KL_DIVERGENCE, i, k - 1),
                        s.layers().get(i) + " " + s.candidates().get(k).label());
                assertTrue(s.bytes(i, k) < s.bytes(i, k - 1));
            }
        }
    }
}
