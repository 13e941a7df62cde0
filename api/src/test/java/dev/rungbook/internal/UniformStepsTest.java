package dev.rungbook.internal;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.testing.Fixtures;
import org.apache.commons.math3.analysis.integration.SimpsonIntegrator;
import org.apache.commons.math3.distribution.NormalDistribution;
import org.junit.jupiter.api.Test;

class UniformStepsTest {
    private static final double TABLE = Fixtures.TABLE_4_DIGITS;
    private static final int[] N = {2, 4, 8, 16};

    @Test
    void gaussianBestStepsMatchMaxTable() {
        // Source: J. Max 1960, best UNIFORM quantizer, values recomputed per check-values.md §1
        double[] step = {1.5958, 0.9957, 0.5860, 0.3352};
        double[] mse = {0.3634, 0.11885, 0.03744, 0.011543};
        for (int i = 0; i < N.length; i++) {
            double d = UniformSteps.bestStepGaussian(N[i]);
            assertEquals(step[i], d, TABLE, "N=" + N[i]);
            assertEquals(mse[i], UniformSteps.mseGaussian(N[i], d), TABLE, "N=" + N[i]);
        }
    }

    @Test
    void laplaceBestStepsMatchPaezGlissonTable() {
        // Source: P. Paez & T. Glisson 1972, best uniform, values recomputed per check-values.md §1
        double[] step = {1.4142, 1.0874, 0.7309, 0.4610};
        double[] mse = {0.5, 0.19630, 0.07175, 0.02535};
        for (int i = 0; i < N.length; i++) {
            double d = UniformSteps.bestStepLaplace(N[i]);
            assertEquals(step[i], d, TABLE, "N=" + N[i]);
            assertEquals(mse[i], UniformSteps.mseLaplace(N[i], d), TABLE, "N=" + N[i]);
        }
    }

    @Test
    void closedFormErrorMatchesNumericalIntegration() {
        // Source: commons-math3 Simpson integration of (x - Q(x))^2 f(x) over [-12, 12]
        NormalDistribution nd = new NormalDistribution(0, 1);
        double s = 1 / Math.sqrt(2);
        for (int levels : new int[] {2, 3, 4, 7, 8}) {
            double step = 0.7;
            int n = levels;
            java.util.function.DoubleUnaryOperator q = x -> {
                // reference quantizer written directly: nearest of the N levels
                double best = 0;
                double bestD = Double.POSITIVE_INFINITY;
                for (int i = 0; i < n; i++) {
                    double level = (i - (n - 1) / 2.0) * step;
                    if (Math.abs(x - level) < bestD) {
                        bestD = Math.abs(x - level);
                        best = level;
                    }
                }
                return best;
            };
            double g = integrate(x -> Math.pow(x - q.applyAsDouble(x), 2) * nd.density(x), step);
            double l = integrate(x -> Math.pow(x - q.applyAsDouble(x), 2) * Math.exp(-Math.abs(x) / s) / (2 * s), step);
            assertEquals(g, UniformSteps.mseGaussian(levels, step), 1e-7, "gaussian N=" + levels);
            assertEquals(l, UniformSteps.mseLaplace(levels, step), 1e-7, "laplace N=" + levels);
        }
    }

    /** Integrates piecewise over [-20, 20] with breakpoints at multiples of step / 2 (the cell edges). */
    private static double integrate(java.util.function.DoubleUnaryOperator f, double step) {
        SimpsonIntegrator simpson = new SimpsonIntegrator(1e-12, 1e-12, 3, 30);
        double total = 0;
        double h = step / 2;
        for (double a = -20; a < 20 - 1e-12; a += h) {
            total += simpson.integrate(1_000_000, f::applyAsDouble, a, a + h);
        }
        return total;
    }

    @Test
    void bestStepIsALocalMinimum() {
        for (int levels : new int[] {3, 5, 32, 256}) {
            double d = UniformSteps.bestStepGaussian(levels);
            double at = UniformSteps.mseGaussian(levels, d);
            assertTrue(at <= UniformSteps.mseGaussian(levels, d * 1.001));
            assertTrue(at <= UniformSteps.mseGaussian(levels, d * 0.999));
        }
        assertThrows(IllegalArgumentException.class, () -> UniformSteps.bestStepGaussian(1));
        assertThrows(IllegalArgumentException.class, () -> UniformSteps.mseLaplace(4, 0));
    }
}
