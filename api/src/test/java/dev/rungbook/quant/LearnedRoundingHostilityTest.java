package dev.rungbook.quant;

import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.metrics.ErrorReport;
import dev.rungbook.round.Calibration;
import dev.rungbook.round.LayerRounding;
import dev.rungbook.round.Rounding;
import dev.rungbook.tensor.Tensor;
import dev.rungbook.testing.Fixtures;
import java.util.concurrent.atomic.AtomicReference;
import java.util.stream.Stream;
import org.junit.jupiter.params.ParameterizedTest;
import org.junit.jupiter.params.provider.MethodSource;
import org.junit.jupiter.params.provider.ValueSource;

/**
 * Numeric hostility for the learned roundings (adaptive rounding and error feedback): NaN and infinite calibration
 * inputs or weights are refused naming the tensor and the position; calibration inputs without variance (all zero,
 * or every sample the same vector) and all-zero weights are handled, with the codes that follow from the published
 * procedures. docs/make_reliability.py reports this class's test count from its surefire report.
 */
class LearnedRoundingHostilityTest {
    private static final int OUT = 6;
    private static final int IN = 16;
    private static final int SAMPLES = 40;

    static Stream<String> rules() {
        return Stream.of("adaptive", "errorFeedback");
    }

    private static LayerRounding rule(String name, Calibration cal) {
        return name.equals("adaptive") ? Rounding.adaptive(cal).iterations(400).seed(3)
                : Rounding.errorFeedback(cal);
    }

    private static Tensor weights() {
        return Tensor.of(Fixtures.gaussian(21, OUT * IN), OUT, IN).withName("hostile.weight");
    }

    private static Tensor inputs(float[] v) {
        return Tensor.of(v, SAMPLES, IN).withName("hostile.calibration");
    }

    @ParameterizedTest
    @ValueSource(floats = {Float.NaN, Float.POSITIVE_INFINITY, Float.NEGATIVE_INFINITY})
    void nonFiniteCalibrationInputsAreRefused(float bad) {
        float[] x = Fixtures.gaussian(4, SAMPLES * IN);
        x[3 * IN + 5] = bad;
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class, () -> Calibration.of(inputs(x)));
        assertTrue(e.getMessage().startsWith("tensor 'hostile.calibration': calibration input " + bad + " at [3, 5]"),
                e.getMessage());
    }

    @ParameterizedTest
    @MethodSource("rules")
    void nanWeightsAreRefusedBeforeLearning(String name) {
        float[] w = Fixtures.gaussian(21, OUT * IN);
        w[IN + 2] = Float.NaN;
        Calibration cal = Calibration.of(inputs(Fixtures.gaussian(4, SAMPLES * IN)));
        Quantizer q = Quantizer.linear(4).rounding(rule(name, cal));
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                () -> q.apply(Tensor.of(w, OUT, IN).withName("hostile.weight")));
        assertTrue(e.getMessage().startsWith("tensor 'hostile.weight': value NaN at index " + (IN + 2) + " [1, 2]"),
                e.getMessage());
    }

    @ParameterizedTest
    @MethodSource("rules")
    void allZeroCalibrationInputs(String name) {
        Calibration cal = Calibration.of(inputs(new float[SAMPLES * IN]));
        AtomicReference<dev.rungbook.round.RoundingRun> run = new AtomicReference<>();
        LayerRounding r = name.equals("adaptive")
                ? Rounding.adaptive(cal).iterations(400).seed(3).onFinish(run::set)
                : Rounding.errorFeedback(cal).onFinish(run::set);
        Tensor w = weights();
        Quantized out = Quantizer.linear(4).rounding(r).apply(w);
        checkFinite(out);
        float[] y = out.dequantized().toFloatArray();
        if (name.equals("errorFeedback")) {
            // Source: Frantar et al., GPTQ (2023), reference procedure [memory, also in ErrorFeedback's Javadoc]:
            // an input that is zero on every sample gets H_ii = 1 and its weight column set to 0.
            assertArrayEquals(new float[OUT * IN], y);
            assertTrue(run.get().warnings().get(0).startsWith(IN + " of " + IN + " inputs are zero"),
                    run.get().warnings().toString());
        } else {
            // With zero inputs the output term is 0 for every rounding; the regulariser alone pushes each h(V) from
            // its start (the fractional part of w / s) to the nearer of 0 and 1: rounding to nearest.
            assertArrayEquals(nearestCodes(w, out), out.codes().toIntArray());
        }
    }

    @ParameterizedTest
    @MethodSource("rules")
    void identicalCalibrationSamples(String name) {
        // Every sample is the same vector: X^T X has rank 1 (zero variance along every feature).
        float[] x0 = Fixtures.gaussian(8, IN);
        float[] x = new float[SAMPLES * IN];
        for (int i = 0; i < SAMPLES; i++) {
            System.arraycopy(x0, 0, x, i * IN, IN);
        }
        Calibration cal = Calibration.of(inputs(x));
        Tensor w = weights();
        Quantized out = Quantizer.linear(4).rounding(rule(name, cal)).apply(w);
        checkFinite(out);
        // The objective only sees the output on x0; both rules must do at least as well there as rounding to
        // nearest (adaptive rounding starts from it; error feedback spreads each rounding error over later columns).
        Quantized nearest = Quantizer.linear(4).apply(w);
        double learned = outputError(w, out.dequantized(), x0);
        double plain = outputError(w, nearest.dequantized(), x0);
        assertTrue(learned <= plain * (1 + 1e-9), name + ": output error " + learned + " vs nearest " + plain);
    }

    @ParameterizedTest
    @MethodSource("rules")
    void allZeroWeights(String name) {
        Calibration cal = Calibration.of(inputs(Fixtures.gaussian(4, SAMPLES * IN)));
        Tensor w = Tensor.of(new float[OUT * IN], OUT, IN).withName("hostile.weight");
        Quantized out = Quantizer.linear(4).asymmetric().rounding(rule(name, cal)).apply(w);
        checkFinite(out);
        assertArrayEquals(new float[OUT * IN], out.dequantized().toFloatArray());
        assertEquals(Double.POSITIVE_INFINITY, out.error().sqnrDb());
    }

    /** Codes of rounding to nearest on the result's own grid, computed here: clamp(rint(w / s + z), -8, 7). */
    private static int[] nearestCodes(Tensor w, Quantized out) {
        float[] v = w.toFloatArray();
        float[] s = out.scales().toFloatArray();
        float[] z = out.zeroPoints().toFloatArray();
        int[] c = new int[v.length];
        for (int i = 0; i < v.length; i++) {
            int row = i / IN;
            c[i] = (int) Math.max(-8, Math.min(7, Math.rint(v[i] / (double) s[row] + z[row])));
        }
        return c;
    }

    /** {@code sum_r ((W~ - W) x0)_r^2} in double. */
    private static double outputError(Tensor w, Tensor approx, float[] x0) {
        float[] a = w.toFloatArray();
        float[] b = approx.toFloatArray();
        double sum = 0;
        for (int r = 0; r < OUT; r++) {
            double d = 0;
            for (int j = 0; j < IN; j++) {
                d += ((double) b[r * IN + j] - a[r * IN + j]) * x0[j];
            }
            sum += d * d;
        }
        return sum;
    }

    private static void checkFinite(Quantized out) {
        for (float v : out.dequantized().toFloatArray()) {
            assertTrue(Float.isFinite(v), "dequantized " + v);
        }
        ErrorReport e = out.error();
        for (int k = 0; k < ErrorReport.METRICS.size(); k++) {
            double v = e.values()[k];
            assertTrue(!Double.isNaN(v), ErrorReport.METRICS.get(k) + " is NaN");
            assertTrue(Double.isFinite(v) || ErrorReport.METRICS.get(k).equals("sqnr_db") && e.mse() == 0,
                    ErrorReport.METRICS.get(k) + " is " + v);
        }
    }
}
