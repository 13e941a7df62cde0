package dev.rungbook.internal;

import org.apache.commons.math3.distribution.NormalDistribution;

/**
 * Analytic clipping ratios for uniform quantization of Laplace and Gaussian sources (the ACIQ rule of Banner,
 * Nahshan and Soudry, NeurIPS 2019). A symmetric {@code M}-bit grid on {@code [-a, a]} has step {@code 2a / 2^M};
 * its rounding noise is approximated by {@code step^2 / 12 = a^2 / (3 * 4^M)} over the whole range, and clipping adds
 * the exact tail error {@code 2 int_a^inf (x - a)^2 f(x) dx}. Internal.
 *
 * <ul>
 *   <li>Laplace(0, b): clipping error {@code 2 b^2 e^{-a/b}}; setting the derivative of
 *       {@code 2 b^2 e^{-a/b} + a^2/(3 * 4^M)} to zero gives {@code a = 3 * 4^M * b * e^{-a/b}}.</li>
 *   <li>N(0, sigma^2), sigma = 1: clipping error {@code 2 [(1 + a^2) Q(a) - a phi(a)]} with {@code Q = 1 - Phi};
 *       its derivative is {@code -4 [phi(a) - a Q(a)]}, so the optimum solves
 *       {@code a = 6 * 4^M * (phi(a) - a Q(a))}.</li>
 * </ul>
 * Both equations have a unique positive root (left side increasing, right side decreasing in {@code a}), found by
 * bisection to full double precision. Ratios are returned for {@code b = 1} and {@code sigma = 1}; multiply by the
 * fitted scale.
 */
public final class AnalyticClipping {
    private static final NormalDistribution NORMAL = new NormalDistribution(null, 0, 1, 1e-9);

    private AnalyticClipping() {
    }

    /** Optimal clip {@code a/b} for Laplace(0, b) at {@code bits} bits (1..16): the root of {@code a = 3 4^M e^{-a}}. */
    public static double laplaceClipRatio(int bits) {
        Checks.inRange(bits, 1, 16, "bits");
        double c = 3 * Math.pow(4, bits);
        return bisect(a -> a - c * Math.exp(-a), 0, 100);
    }

    /** Optimal clip {@code a/sigma} for N(0, sigma^2) at {@code bits} bits (1..16). */
    public static double gaussianClipRatio(int bits) {
        Checks.inRange(bits, 1, 16, "bits");
        double c = 6 * Math.pow(4, bits);
        return bisect(a -> a - c * (NORMAL.density(a) - a * NORMAL.cumulativeProbability(-a)), 0, 40);
    }

    /** The approximate error {@code 2 b^2 e^{-a/b} + a^2/(3 * 4^M)} minimised by {@link #laplaceClipRatio(int)}. */
    public static double laplaceMse(double a, double b, int bits) {
        return 2 * b * b * Math.exp(-a / b) + a * a / (3 * Math.pow(4, bits));
    }

    /** The approximate error {@code 2[(1+a^2)Q(a) - a phi(a)] + a^2/(3 * 4^M)} for N(0,1). */
    public static double gaussianMse(double a, int bits) {
        double clip = 2 * ((1 + a * a) * NORMAL.cumulativeProbability(-a) - a * NORMAL.density(a));
        return clip + a * a / (3 * Math.pow(4, bits));
    }

    private static double bisect(java.util.function.DoubleUnaryOperator f, double lo, double hi) {
        // f is increasing with f(lo) < 0 < f(hi)
        for (int i = 0; i < 200 && hi - lo > 0; i++) {
            double mid = 0.5 * (lo + hi);
            if (mid == lo || mid == hi) {
                break;
            }
            if (f.applyAsDouble(mid) < 0) {
                lo = mid;
            } else {
                hi = mid;
            }
        }
        return 0.5 * (lo + hi);
    }
}
