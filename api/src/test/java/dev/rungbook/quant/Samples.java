package dev.rungbook.quant;

import dev.rungbook.tensor.Tensor;
import dev.rungbook.testing.Fixtures;
import java.util.Random;
import org.apache.commons.math3.distribution.NormalDistribution;

/**
 * Seeded, stratified samples for checks against published tables: one draw {@code F^-1((i + u_i) / n)} in each of
 * {@code n} equal-probability strata. The distribution is exactly that of plain sampling; the sampling noise of fitted
 * levels and steps is far smaller, so 4-digit table values can be checked on 10^6 values.
 */
public final class Samples {
    private Samples() {
    }

    /** n stratified N(0, 1) samples. */
    public static Tensor gaussian(long seed, int n) {
        Random r = Fixtures.random(seed);
        NormalDistribution nd = new NormalDistribution(null, 0, 1, 1e-12);
        float[] v = new float[n];
        for (int i = 0; i < n; i++) {
            v[i] = (float) nd.inverseCumulativeProbability((i + r.nextDouble()) / n);
        }
        return Tensor.of(v, n).withName("gaussian");
    }

    /** n stratified unit-variance Laplace samples ({@code b = 1/sqrt(2)}), by the inverse distribution function. */
    public static Tensor laplace(long seed, int n) {
        Random r = Fixtures.random(seed);
        double b = 1 / Math.sqrt(2);
        float[] v = new float[n];
        for (int i = 0; i < n; i++) {
            double u = (i + r.nextDouble()) / n - 0.5;
            v[i] = (float) (-b * Math.signum(u) * Math.log(1 - 2 * Math.abs(u)));
        }
        return Tensor.of(v, n).withName("laplace");
    }
}
