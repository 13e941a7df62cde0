package dev.rungbook.internal;

import org.apache.commons.math3.distribution.NormalDistribution;
import org.apache.commons.math3.optim.MaxEval;
import org.apache.commons.math3.optim.nonlinear.scalar.GoalType;
import org.apache.commons.math3.optim.univariate.BrentOptimizer;
import org.apache.commons.math3.optim.univariate.SearchInterval;
import org.apache.commons.math3.optim.univariate.UnivariateObjectiveFunction;
import org.apache.commons.math3.optim.univariate.UnivariatePointValuePair;

/**
 * Step sizes of MSE-optimal uniform quantizers for unit-variance Gaussian and Laplacian sources, from the exact
 * expected squared error (granular plus overload), minimised numerically. A reference for data-driven range
 * searches. Internal.
 *
 * <p>The quantizer with {@code N} levels and step {@code d} is symmetric about 0: for even {@code N} (midrise) the
 * levels are {@code +-(i - 1/2) d}, {@code i = 1..N/2}, with thresholds at {@code 0, +-d, ..., +-(N/2 - 1) d}; for
 * odd {@code N} (midtread) the levels are {@code i d}, {@code |i| <= (N-1)/2}, with thresholds at {@code +-(i + 1/2)
 * d}. Values beyond the outermost threshold go to the outermost level (overload). The expected error is a sum over
 * cells of closed-form partial moments: for N(0,1), {@code int_a^b (x-c)^2 phi = (1 + c^2)(Phi(b) - Phi(a)) + (a - 2c)
 * phi(a) - (b - 2c) phi(b)}; for the Laplacian with scale {@code s = 1/sqrt 2} on {@code x >= 0},
 * {@code int_a^inf (x-c)^2 e^{-x/s}/(2s) dx = e^{-a/s} ((a-c)^2 + 2s(a-c) + 2s^2) / 2}.
 */
public final class UniformSteps {
    private static final NormalDistribution NORMAL = new NormalDistribution(null, 0, 1, 1e-9);
    private static final double LAPLACE_SCALE = 1 / Math.sqrt(2);

    private UniformSteps() {
    }

    /** MSE-optimal step of an {@code levels}-level uniform quantizer for N(0,1); {@code levels >= 2}. */
    public static double bestStepGaussian(int levels) {
        return bestStep(levels, true);
    }

    /** MSE-optimal step of an {@code levels}-level uniform quantizer for the unit-variance Laplacian. */
    public static double bestStepLaplace(int levels) {
        return bestStep(levels, false);
    }

    /** Expected squared error of the {@code levels}-level uniform quantizer with step {@code step} on N(0,1). */
    public static double mseGaussian(int levels, double step) {
        return mse(levels, step, true);
    }

    /** Expected squared error of the {@code levels}-level uniform quantizer on the unit-variance Laplacian. */
    public static double mseLaplace(int levels, double step) {
        return mse(levels, step, false);
    }

    private static void check(int levels) {
        Checks.inRange(levels, 2, 1 << 16, "number of levels");
    }

    private static double mse(int levels, double step, boolean gaussian) {
        check(levels);
        Checks.require(step > 0 && Double.isFinite(step), "step must be positive and finite, got %s", step);
        // Sum over the cells on x >= 0, doubled by symmetry; a midtread centre cell [-d/2, d/2] is split at 0.
        double total = 0;
        int half = levels / 2;
        boolean odd = levels % 2 == 1;
        for (int i = 0; i < (odd ? half + 1 : half); i++) {
            double c = odd ? i * step : (i + 0.5) * step;
            double a = odd ? (i == 0 ? 0 : (i - 0.5) * step) : i * step;
            boolean last = i == (odd ? half : half - 1);
            double b = last ? Double.POSITIVE_INFINITY : (odd ? (i + 0.5) * step : (i + 1) * step);
            total += gaussian ? gaussianMoment(a, b, c) : laplaceMoment(a, b, c);
        }
        return 2 * total;
    }

    /** {@code int_a^b (x - c)^2 phi(x) dx} for {@code 0 <= a < b <= inf}. */
    static double gaussianMoment(double a, double b, double c) {
        double pa = NORMAL.density(a);
        double pb = Double.isInfinite(b) ? 0 : NORMAL.density(b);
        // Phi(b) - Phi(a) via upper tails for accuracy at large arguments
        double mass = NORMAL.cumulativeProbability(-a) - (Double.isInfinite(b) ? 0 : NORMAL.cumulativeProbability(-b));
        double tb = Double.isInfinite(b) ? 0 : (b - 2 * c) * pb;
        return (1 + c * c) * mass + (a - 2 * c) * pa - tb;
    }

    /** {@code int_a^b (x - c)^2 f(x) dx} for the unit-variance Laplacian density f, {@code 0 <= a < b <= inf}. */
    static double laplaceMoment(double a, double b, double c) {
        return laplaceTail(a, c) - (Double.isInfinite(b) ? 0 : laplaceTail(b, c));
    }

    private static double laplaceTail(double t, double c) {
        double s = LAPLACE_SCALE;
        double d = t - c;
        return 0.5 * Math.exp(-t / s) * (d * d + 2 * s * d + 2 * s * s);
    }

    private static double bestStep(int levels, boolean gaussian) {
        check(levels);
        // Coarse scan to bracket the minimum (the error is unimodal in the step for these sources), then Brent.
        double hi = 2 * (gaussian ? 8.0 : 30.0) / levels + 2;
        int grid = 400;
        double bestX = hi / grid;
        double bestV = Double.POSITIVE_INFINITY;
        for (int i = 1; i <= grid; i++) {
            double x = hi * i / grid;
            double v = mse(levels, x, gaussian);
            if (v < bestV) {
                bestV = v;
                bestX = x;
            }
        }
        double lo = Math.max(hi / grid * 1e-3, bestX - hi / grid);
        double up = bestX + hi / grid;
        BrentOptimizer opt = new BrentOptimizer(1e-13, 1e-15);
        UnivariatePointValuePair r = opt.optimize(new MaxEval(10_000), GoalType.MINIMIZE,
                new UnivariateObjectiveFunction(x -> mse(levels, x, gaussian)), new SearchInterval(lo, up, bestX));
        return r.getPoint();
    }
}
