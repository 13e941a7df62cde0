package dev.rungbook.nn;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertTrue;
import static org.junit.jupiter.api.Assumptions.assumeTrue;

import dev.rungbook.internal.TensorAccess;
import dev.rungbook.quant.Quantizer;
import dev.rungbook.tensor.Tensor;
import dev.rungbook.testing.Fixtures;
import java.io.IOException;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.Locale;
import org.junit.jupiter.api.Test;
import tech.tablesaw.api.Table;

class LayerErrorsTest {
    /** MSE, SQNR dB, cosine and max |error| written out directly in double: {mse, sqnr, cos, max}. */
    static double[] direct(Tensor ref, Tensor approx) {
        float[] a = TensorAccess.data(ref);
        float[] b = TensorAccess.data(approx);
        double see = 0;
        double saa = 0;
        double sbb = 0;
        double sab = 0;
        double max = 0;
        for (int i = 0; i < a.length; i++) {
            double d = (double) a[i] - b[i];
            see += d * d;
            saa += (double) a[i] * a[i];
            sbb += (double) b[i] * b[i];
            sab += (double) a[i] * b[i];
            max = Math.max(max, Math.abs(d));
        }
        return new double[] {see / a.length, 10 * Math.log10(saa / see), sab / Math.sqrt(saa * sbb), max};
    }

    private static void assertRow(Table t, int row, String kind, double[] want) {
        String[] names = {"_mse", "_sqnr_db", "_cosine", "_max_abs_error"};
        for (int k = 0; k < 4; k++) {
            double got = t.doubleColumn(kind + names[k]).get(row);
            assertEquals(want[k], got, 1e-9 * Math.max(1, Math.abs(want[k])), kind + names[k] + " row " + row);
        }
    }

    private static Tensor relu(Tensor t) {
        return new Relu("r").forward(t);
    }

    @Test
    void aloneAndCumulativeErrorsMatchTheDirectFormulas() {
        // Source: MSE = mean (a - b)^2, SQNR = 10 log10(sum a^2 / sum (a - b)^2), cosine = a.b / (|a| |b|), written
        // out independently of ErrorReport on activations recomputed layer by layer.
        Network net = Trainer.initialMlp(61, 16, 32, 24, 4);
        Tensor cal = EqualizationTest.inputs(62, 256, 16);
        Tensor x = EqualizationTest.inputs(63, 400, 16);
        SimulatedNetwork sim = NetworkQuantization.of(net).weights(Quantizer.linear(4)).calibrate(cal);
        Table t = sim.layerErrors(x);
        assertEquals(SimulatedNetwork.ERROR_COLUMNS, t.columnNames());
        assertEquals(4, t.rowCount());
        assertEquals("input", t.stringColumn("layer").get(0));
        assertEquals("fc2", t.stringColumn("layer").get(2));

        Network q = sim.quantizedWeights();
        Tensor xq = sim.input().orElseThrow().apply(x);
        assertRow(t, 0, "alone", direct(x, xq));
        assertRow(t, 0, "cumulative", direct(x, xq));
        // fc2 alone: float input into it, quantized weight, ReLU, quantized output
        Tensor f1 = relu(net.linearLayers().get(0).forward(x));
        Tensor f2 = relu(net.linearLayers().get(1).forward(f1));
        Tensor a2 = sim.output("fc2").orElseThrow().apply(relu(q.linearLayers().get(1).forward(f1)));
        assertRow(t, 2, "alone", direct(f2, a2));
        // fc2 cumulative: everything up to fc2 quantized
        Tensor c1 = sim.output("fc1").orElseThrow().apply(relu(q.linearLayers().get(0).forward(xq)));
        Tensor c2 = sim.output("fc2").orElseThrow().apply(relu(q.linearLayers().get(1).forward(c1)));
        assertRow(t, 2, "cumulative", direct(f2, c2));
        // the last row's cumulative error is that of the whole simulated network
        assertRow(t, 3, "cumulative", direct(net.forward(x), sim.forward(x)));
        assertEquals(sim.weights("fc1").orElseThrow().error().sqnrDb(), t.doubleColumn("weight_sqnr_db").get(1));
        assertTrue(Double.isNaN(t.doubleColumn("weight_sqnr_db").getDouble(0)));
    }

    @Test
    void layerErrorsAgreeWithNumpy() throws IOException {
        String py = Fixtures.pythonWithNumpy();
        assumeTrue(py != null, "python3 with NumPy not available");
        Network net = Trainer.initialMlp(64, 8, 16, 3);
        Tensor cal = EqualizationTest.inputs(65, 128, 8);
        Tensor x = EqualizationTest.inputs(66, 100, 8);
        SimulatedNetwork sim = NetworkQuantization.of(net).weights(Quantizer.linear(3)).calibrate(cal);
        Table t = sim.layerErrors(x);
        Path dir = Fixtures.tempDir("layer-errors");
        Path a = dir.resolve("a.txt");
        Path b = dir.resolve("b.txt");
        Files.writeString(a, text(net.forward(x)));
        Files.writeString(b, text(sim.forward(x)));
        // Source: NumPy in float64 on the same float32 values.
        String out = Fixtures.runPython(py, String.join("\n",
                "import sys, numpy as np",
                "a = np.loadtxt(sys.argv[1], dtype=np.float32).astype(np.float64)",
                "b = np.loadtxt(sys.argv[2], dtype=np.float32).astype(np.float64)",
                "e = a - b",
                "print(np.mean(e * e), 10 * np.log10(np.sum(a * a) / np.sum(e * e)),",
                "      np.dot(a, b) / np.linalg.norm(a) / np.linalg.norm(b), np.max(np.abs(e)))"),
                a.toString(), b.toString()).trim();
        String[] v = out.split("\\s+");
        double[] want = new double[4];
        for (int k = 0; k < 4; k++) {
            want[k] = Double.parseDouble(v[k]);
        }
        assertRow(t, 2, "cumulative", want);
    }

    private static String text(Tensor t) {
        StringBuilder sb = new StringBuilder();
        for (float f : TensorAccess.data(t)) {
            sb.append(String.format(Locale.ROOT, "%.9g%n", f));
        }
        return sb.toString();
    }

    @Test
    void theLayerThatHurtsHasTheLowestAloneSqnr() {
        // Common practice: a 2-bit layer among 8-bit ones dominates the output error.
        Network net = Trainer.initialMlp(67, 16, 32, 24, 4);
        Tensor cal = EqualizationTest.inputs(68, 256, 16);
        SimulatedNetwork sim = NetworkQuantization.of(net).layer("fc2", l -> l.weights(Quantizer.linear(2)))
                .calibrate(cal);
        Table t = sim.layerErrors(EqualizationTest.inputs(69, 300, 16));
        double[] alone = t.doubleColumn("alone_sqnr_db").asDoubleArray();
        int worst = 1;
        for (int r = 2; r < alone.length; r++) {
            worst = alone[r] < alone[worst] ? r : worst;
        }
        assertEquals("fc2", t.stringColumn("layer").get(worst));
        // Cumulative SQNR can only fall behind the alone SQNR of the hurting layer (errors add up).
        assertTrue(t.doubleColumn("cumulative_sqnr_db").get(2) <= alone[2] + 0.5);
    }
}
