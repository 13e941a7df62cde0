package dev.rungbook.metrics;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertFalse;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;
import static org.junit.jupiter.api.Assumptions.assumeTrue;

import dev.rungbook.quant.Quantizer;
import dev.rungbook.tensor.Tensor;
import dev.rungbook.testing.Fixtures;
import java.nio.charset.StandardCharsets;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.Locale;
import java.util.Random;
import org.apache.commons.math3.linear.ArrayRealVector;
import org.junit.jupiter.api.Test;
import tech.tablesaw.api.Table;

class ErrorReportTest {
    @Test
    void smallCaseMatchesHandComputedValues() {
        // x = [1, 2, 3, 4], y = [1, 2, 3, 5]: e = [0, 0, 0, 1]; sum x^2 = 30, sum y^2 = 39, x.y = 34.
        Tensor x = Tensor.of(new float[] {1, 2, 3, 4}, 2, 2).withName("w");
        Tensor y = Tensor.of(new float[] {1, 2, 3, 5}, 2, 2);
        ErrorReport r = ErrorReport.of(x, y);
        assertEquals(0.25, r.mse());
        assertEquals(0.5, r.rmse());
        assertEquals(0.25, r.mae());
        assertEquals(1.0, r.maxAbsError());
        assertEquals(10 * Math.log10(30), r.sqnrDb(), 1e-12);
        assertEquals(34 / Math.sqrt(30 * 39), r.cosine(), 1e-12);
        assertEquals(1.0, r.frobenius());
        assertEquals(1 / Math.sqrt(30), r.relativeFrobenius(), 1e-12);
        assertEquals(4, r.count());
    }

    @Test
    void metricsAgreeWithCommonsMathVectors() {
        // Source: commons-math3 ArrayRealVector: getDistance (Euclidean), getL1Distance, getLInfDistance, cosine.
        Tensor x = Tensor.of(Fixtures.gaussian(1, 5000), 50, 100);
        Tensor y = Quantizer.linear(4).apply(x).dequantized();
        ErrorReport r = ErrorReport.of(x, y);
        double[] xd = new double[5000];
        double[] yd = new double[5000];
        for (int i = 0; i < 5000; i++) {
            xd[i] = x.getFlat(i);
            yd[i] = y.getFlat(i);
        }
        ArrayRealVector a = new ArrayRealVector(xd);
        ArrayRealVector b = new ArrayRealVector(yd);
        assertEquals(a.getDistance(b), r.frobenius(), 1e-9);
        assertEquals(a.getDistance(b) * a.getDistance(b) / 5000, r.mse(), 1e-12);
        assertEquals(a.getL1Distance(b) / 5000, r.mae(), 1e-12);
        assertEquals(a.getLInfDistance(b), r.maxAbsError(), 1e-12);
        assertEquals(a.cosine(b), r.cosine(), 1e-12);
        assertEquals(a.getDistance(b) / a.getNorm(), r.relativeFrobenius(), 1e-12);
        assertEquals(20 * Math.log10(a.getNorm() / a.getDistance(b)), r.sqnrDb(), 1e-9);
    }

    @Test
    void degenerateCasesHaveDefinedValues() {
        Tensor x = Tensor.of(new float[] {1, -2, 3}, 3);
        ErrorReport exact = ErrorReport.of(x, x);
        assertEquals(Double.POSITIVE_INFINITY, exact.sqnrDb());
        assertEquals(0.0, exact.relativeFrobenius());
        assertEquals(1.0, exact.cosine());
        assertEquals(0.0, exact.klDivergence());
        Tensor zero = Tensor.of(new float[3], 3);
        ErrorReport zeroSignal = ErrorReport.of(zero, x);
        assertEquals(Double.NEGATIVE_INFINITY, zeroSignal.sqnrDb());
        assertEquals(Double.POSITIVE_INFINITY, zeroSignal.relativeFrobenius());
        assertEquals(0.0, zeroSignal.cosine());
        ErrorReport bothZero = ErrorReport.of(zero, zero);
        assertEquals(Double.POSITIVE_INFINITY, bothZero.sqnrDb());
        assertEquals(1.0, bothZero.cosine());
        assertEquals(0.0, bothZero.mse());
        ErrorReport empty = ErrorReport.of(Tensor.of(new float[0], 0), Tensor.of(new float[0], 0));
        for (ErrorReport r : new ErrorReport[] {exact, zeroSignal, bothZero, empty}) {
            for (double v : r.values()) {
                assertFalse(Double.isNaN(v), r.toString());
            }
            for (String c : ErrorReport.CHANNEL_COLUMNS.subList(1, ErrorReport.CHANNEL_COLUMNS.size())) {
                if (r.count() > 0) {
                    assertFalse(Double.isNaN(r.perChannel().doubleColumn(c).get(0)), c);
                }
            }
        }
    }

    @Test
    void klDivergenceMatchesAHandComputedTwoBinCase() {
        // x = [0, 0, 1, 1], y = [0, 1, 1, 1]: P = (1/2, 1/2), Q = (1/4, 3/4) in the end bins;
        // KL = 1/2 ln 2 + 1/2 ln(2/3) = 0.1438410362; Q's 1e-6 uniform mixture moves it by about 1e-6.
        ErrorReport r = ErrorReport.of(Tensor.of(new float[] {0, 0, 1, 1}, 4), Tensor.of(new float[] {0, 1, 1, 1},
                4));
        assertEquals(0.5 * Math.log(2) + 0.5 * Math.log(2.0 / 3), r.klDivergence(), 1e-5);
    }

    @Test
    void klDivergenceMatchesNumpyHistograms() throws Exception {
        // Source: NumPy histogram (256 equal bins over the common range) and the KL formula of the class doc.
        String py = Fixtures.pythonWithNumpy();
        assumeTrue(py != null, "python3 with numpy not found");
        Random rnd = Fixtures.random(3);
        int n = 20000;
        float[] x = new float[n];
        float[] y = new float[n];
        StringBuilder sx = new StringBuilder();
        StringBuilder sy = new StringBuilder();
        for (int i = 0; i < n; i++) {
            x[i] = (float) rnd.nextGaussian();
            y[i] = (float) (x[i] + 0.2 * rnd.nextGaussian() + 0.1);
            sx.append(Float.toString(x[i])).append('\n');
            sy.append(Float.toString(y[i])).append('\n');
        }
        Path dir = Fixtures.tempDir("kl");
        Path fx = dir.resolve("x.txt");
        Path fy = dir.resolve("y.txt");
        Files.writeString(fx, sx, StandardCharsets.US_ASCII);
        Files.writeString(fy, sy, StandardCharsets.US_ASCII);
        String script = String.join("\n",
                "import sys, numpy as np",
                "x = np.loadtxt(sys.argv[1], dtype=np.float32).astype(np.float64)",
                "y = np.loadtxt(sys.argv[2], dtype=np.float32).astype(np.float64)",
                "lo = min(x.min(), y.min()); hi = max(x.max(), y.max())",
                "p, _ = np.histogram(x, bins=256, range=(lo, hi))",
                "q, _ = np.histogram(y, bins=256, range=(lo, hi))",
                "p = p / len(x); q = (1 - 1e-6) * q / len(y) + 1e-6 / 256",
                "m = p > 0",
                "print(repr(float(np.sum(p[m] * np.log(p[m] / q[m])))))");
        double expected = Double.parseDouble(Fixtures.runPython(py, script, fx.toString(), fy.toString()).trim());
        double got = ErrorReport.of(Tensor.of(x, n), Tensor.of(y, n)).klDivergence();
        assertEquals(expected, got, 1e-9 + 1e-6 * expected, String.format(Locale.ROOT, "numpy %.9f", expected));
        assertTrue(got > 0.01, "the shifted, noisy copy differs: " + got);
    }

    @Test
    void perChannelTableBreaksDownEachChannel() {
        Tensor x = Tensor.of(Fixtures.gaussian(2, 8 * 32), 8, 32).withName("fc");
        Tensor y = Quantizer.linear(3).perTensor().apply(x).dequantized();
        ErrorReport r = ErrorReport.of(x, y);
        Table t = r.perChannel();
        assertEquals(ErrorReport.CHANNEL_COLUMNS, t.columnNames());
        assertEquals(8, t.rowCount());
        double total = 0;
        for (int c = 0; c < 8; c++) {
            ErrorReport one = ErrorReport.of(Tensor.of(x.channel(0, c).toFloatArray(), 32),
                    Tensor.of(y.channel(0, c).toFloatArray(), 32));
            assertEquals(c, t.intColumn("channel").get(c));
            assertEquals(one.mse(), t.doubleColumn("mse").get(c), 1e-15);
            assertEquals(one.sqnrDb(), t.doubleColumn("sqnr_db").get(c), 1e-12);
            assertEquals(one.cosine(), t.doubleColumn("cosine").get(c), 1e-15);
            total += one.mse();
        }
        assertEquals(r.mse(), total / 8, 1e-12);
        assertEquals(32, r.perChannel(1).rowCount());
        Table summary = r.toTable();
        assertEquals(ErrorReport.METRICS.size(), summary.rowCount());
        assertEquals(r.mse(), summary.doubleColumn("value").get(0));
        assertEquals("kl_divergence", summary.stringColumn("metric").get(ErrorReport.METRICS.size() - 1));
    }

    @Test
    void refusesMismatchedShapesNamingBoth() {
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class, () -> ErrorReport.of(
                Tensor.of(new float[6], 2, 3).withName("a"), Tensor.of(new float[6], 3, 2).withName("b")));
        assertEquals("cannot compare tensor 'a' of shape [2, 3] with tensor 'b' of shape [3, 2]", e.getMessage());
    }
}
