package dev.rungbook.round;

import static dev.rungbook.round.LearnedRoundingFixtures.correlatedInputs;
import static dev.rungbook.round.LearnedRoundingFixtures.gaussian;
import static dev.rungbook.round.LearnedRoundingFixtures.perRowGrid;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.internal.LinearAlgebra;
import java.util.Random;
import org.junit.jupiter.api.Test;

/** The adaptive-rounding objective and its analytic gradient. */
class AdaptiveObjectiveTest {
    private static void checkGradient(boolean bias, boolean relu, boolean regularise) {
        checkGradient(bias, relu, regularise, 4.0);
    }

    private static void checkGradient(boolean bias, boolean relu, boolean regularise, double beta) {
        checkGradient(bias, relu ? Calibration.Activation.RELU : Calibration.Activation.IDENTITY, regularise, beta,
                1.0);
    }

    private static void checkGradient(boolean bias, Calibration.Activation act, boolean regularise, double beta,
            double weightScale) {
        boolean relu = act != Calibration.Activation.IDENTITY;
        int rows = 3;
        int cols = 5;
        int n = 40;
        float[] w = gaussian(7, rows * cols, weightScale);
        float[] x = correlatedInputs(8, n, cols, 5);
        float[] b = bias ? gaussian(9, rows, 1.0) : null;
        GridAssignment g = perRowGrid(w, rows, cols, 4);
        if (act == Calibration.Activation.RELU6) {
            int below = 0;
            int above = 0;
            for (int i = 0; i < n; i++) {
                for (int o = 0; o < rows; o++) {
                    double pre = b == null ? 0 : b[o];
                    for (int c = 0; c < cols; c++) {
                        pre += (double) w[o * cols + c] * x[i * cols + c];
                    }
                    below += pre < 0 ? 1 : 0;
                    above += pre > 6 ? 1 : 0;
                }
            }
            assertTrue(below > 0 && above > 0, "outputs below 0: " + below + ", above 6: " + above);
        }
        AdaptiveObjective obj = new AdaptiveObjective(LinearAlgebra.pureJava(), w, rows, cols, x, n, b, act, g,
                0.05);
        Random r = new Random(10);
        float[] v = new float[rows * cols];
        for (int e = 0; e < v.length; e++) {
            v[e] = (float) (-1.5 + 3 * r.nextDouble()); // h(V) strictly inside (0, 1)
        }
        int[] idx = new int[n];
        for (int i = 0; i < n; i++) {
            idx[i] = (i * 7) % n;
        }
        float[] grad = new float[v.length];
        obj.lossAndGradient(v, idx, 25, beta, regularise, grad);
        float[] scratch = new float[v.length];
        for (int e = 0; e < v.length; e++) {
            float keep = v[e];
            double eps = 1e-2;
            v[e] = (float) (keep + eps);
            double up = obj.lossAndGradient(v, idx, 25, beta, regularise, scratch);
            v[e] = (float) (keep - eps);
            double down = obj.lossAndGradient(v, idx, 25, beta, regularise, scratch);
            v[e] = keep;
            double numeric = (up - down) / (2 * eps);
            // Source: central finite differences of the objective as defined (check-values.md section 7).
            assertEquals(numeric, grad[e], 2e-2 * Math.abs(numeric) + 2e-4,
                    "d loss / d V[" + e + "] (bias " + bias + ", relu " + relu + ", regulariser " + regularise + ")");
        }
    }

    @Test
    void gradientMatchesFiniteDifferences() {
        checkGradient(false, false, false);
        checkGradient(false, false, true);
        checkGradient(true, true, false);
        checkGradient(true, true, true);
        // beta 20 (the start of the schedule, power from the table) and 1.5 (below 2: power by exp and log)
        checkGradient(false, false, true, 20.0);
        checkGradient(true, false, true, 1.5);
        // ReLU6, with weights large enough that outputs fall on both flat parts (below 0 and above 6)
        checkGradient(true, Calibration.Activation.RELU6, true, 4.0, 3.0);
    }

    @Test
    void relu6IsClippedAndFlatOutsideItsRange() {
        // Source: the definition ReLU6(y) = min(max(0, y), 6), derivative 1 on (0, 6) and 0 elsewhere
        Calibration.Activation a = Calibration.Activation.RELU6;
        assertEquals(0.0, a.apply(-2.5), 0.0);
        assertEquals(3.25, a.apply(3.25), 0.0);
        assertEquals(6.0, a.apply(9.0), 0.0);
        assertEquals(0.0, a.slope(-1), 0.0);
        assertEquals(1.0, a.slope(5.9), 0.0);
        assertEquals(0.0, a.slope(6.5), 0.0);
    }

    @Test
    void rectifiedSigmoidStartsAtTheFractionalPart() {
        float[] w = gaussian(3, 12, 1.0);
        GridAssignment g = perRowGrid(w, 3, 4, 4);
        AdaptiveObjective obj = new AdaptiveObjective(LinearAlgebra.pureJava(), w, 3, 4, new float[8], 2, null,
                Calibration.Activation.IDENTITY, g, 0.01);
        float[] v = obj.initialV(w);
        for (int e = 0; e < w.length; e++) {
            double y = g.scaled(e, w[e]);
            // Source: h(V0) = w/s - floor(w/s), zeta 1.1, gamma -0.1 (check-values.md section 7).
            assertEquals(y - Math.floor(y), AdaptiveObjective.rectified(v[e]), 1e-6, "element " + e);
        }
        assertEquals(0.0, AdaptiveObjective.rectified(-30), 0.0);
        assertEquals(1.0, AdaptiveObjective.rectified(30), 0.0);
        // sigmoid(0) = 1/2 -> 0.5 * 1.2 - 0.1 = 0.5
        assertEquals(0.5, AdaptiveObjective.rectified(0), 1e-15);
        // h = 0 exactly below V = ln(1/11) = -2.3979 (sigmoid 1/12), and just above it h > 0.
        assertTrue(AdaptiveObjective.rectified(-2.41) == 0.0, "sigmoid(-2.41) * 1.2 - 0.1 < 0 is clipped");
        assertTrue(AdaptiveObjective.rectified(-2.38) > 0.0, "sigmoid(-2.38) * 1.2 - 0.1 > 0");
    }
}
