package dev.rungbook.internal;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.testing.Fixtures;
import org.apache.commons.math3.optim.MaxEval;
import org.apache.commons.math3.optim.nonlinear.scalar.GoalType;
import org.apache.commons.math3.optim.univariate.BrentOptimizer;
import org.apache.commons.math3.optim.univariate.SearchInterval;
import org.apache.commons.math3.optim.univariate.UnivariateObjectiveFunction;
import org.junit.jupiter.api.Test;

class AnalyticClippingTest {
    private static final double TABLE = Fixtures.TABLE_4_DIGITS;

    @Test
    void laplaceRatiosMatchPublishedTable() {
        // Source: Banner, Nahshan & Soudry, NeurIPS 2019, check-values.md §2 — values [computed] from the paper's
        // equation; the paper's printed 2.83, 3.89, 5.03 for 2, 3, 4 bits are from [memory]. Indexed by bits.
        double[] expected = {1.863, 2.831, 3.897, 5.029, 6.205, 7.413, 8.646, 9.897};
        for (int m = 1; m <= 8; m++) {
            double a = AnalyticClipping.laplaceClipRatio(m);
            assertEquals(expected[m - 1], a, TABLE, "bits " + m);
            assertEquals(a, 3 * Math.pow(4, m) * Math.exp(-a), 1e-9, "fixed point, bits " + m);
        }
    }

    @Test
    void gaussianRatiosMatchTable() {
        // Source: check-values.md §2, Gaussian multiples [computed] from the same error model
        double[] expected = {1.240, 1.711, 2.152, 2.559, 2.936, 3.287, 3.615, 3.924};
        for (int m = 1; m <= 8; m++) {
            assertEquals(expected[m - 1], AnalyticClipping.gaussianClipRatio(m), TABLE, "bits " + m);
        }
    }

    @Test
    void ratiosMinimiseTheStatedErrorForAllBitWidths() {
        // Source: commons-math3 Brent minimisation of the stated error model (independent of the root finding)
        BrentOptimizer opt = new BrentOptimizer(1e-12, 1e-14);
        double prevL = 0;
        double prevG = 0;
        for (int m = 1; m <= 16; m++) {
            int bits = m;
            double l = opt.optimize(new MaxEval(10_000), GoalType.MINIMIZE,
                    new UnivariateObjectiveFunction(a -> AnalyticClipping.laplaceMse(a, 1, bits)),
                    new SearchInterval(0.01, 40)).getPoint();
            double g = opt.optimize(new MaxEval(10_000), GoalType.MINIMIZE,
                    new UnivariateObjectiveFunction(a -> AnalyticClipping.gaussianMse(a, bits)),
                    new SearchInterval(0.01, 12)).getPoint();
            assertEquals(l, AnalyticClipping.laplaceClipRatio(m), 1e-5, "laplace bits " + m);
            assertEquals(g, AnalyticClipping.gaussianClipRatio(m), 1e-5, "gaussian bits " + m);
            assertTrue(AnalyticClipping.laplaceClipRatio(m) > prevL && AnalyticClipping.gaussianClipRatio(m) > prevG);
            prevL = AnalyticClipping.laplaceClipRatio(m);
            prevG = AnalyticClipping.gaussianClipRatio(m);
        }
        assertThrows(IllegalArgumentException.class, () -> AnalyticClipping.laplaceClipRatio(0));
        assertThrows(IllegalArgumentException.class, () -> AnalyticClipping.gaussianClipRatio(17));
    }
}
