package dev.rungbook.range;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertNotEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.quant.Quantized;
import dev.rungbook.quant.Quantizer;
import dev.rungbook.tensor.Tensor;
import dev.rungbook.testing.Fixtures;
import java.util.Random;
import org.apache.commons.math3.distribution.NormalDistribution;
import org.apache.commons.math3.stat.descriptive.rank.Percentile;
import org.junit.jupiter.api.Test;

class RangeRuleTest {
    private static final int MILLION = 1_000_000;

    private static Tensor gaussian(long seed) {
        return Tensor.of(Fixtures.gaussian(seed, MILLION), MILLION).withName("gauss");
    }

    /**
     * 10^6 seeded, stratified N(0,1) samples: one draw {@code Phi^-1((i + u_i) / n)} in each of n equal-probability
     * strata. Same distribution as plain sampling, far less sampling noise in the fitted step.
     */
    private static Tensor stratifiedGaussian(long seed) {
        Random r = Fixtures.random(seed);
        NormalDistribution nd = new NormalDistribution(null, 0, 1, 1e-12);
        float[] v = new float[MILLION];
        for (int i = 0; i < MILLION; i++) {
            v[i] = (float) nd.inverseCumulativeProbability((i + r.nextDouble()) / MILLION);
        }
        return Tensor.of(v, MILLION).withName("gauss");
    }

    /** Unit-variance Laplace samples: b = 1/sqrt(2). */
    private static Tensor laplace(long seed) {
        Random r = Fixtures.random(seed);
        float[] v = new float[MILLION];
        double b = 1 / Math.sqrt(2);
        for (int i = 0; i < MILLION; i++) {
            double u = r.nextDouble() - 0.5;
            v[i] = (float) (-b * Math.signum(u) * Math.log(1 - 2 * Math.abs(u)));
        }
        return Tensor.of(v, MILLION).withName("laplace");
    }

    @Test
    void mseRuleFindsMaxsBestUniformStepsForTheGaussian() {
        // Source: J. Max, "Quantizing for minimum distortion", IRE Trans. IT-6, 1960, best uniform quantizer of a
        // unit Gaussian (check-values section 1; 4-digit values [computed], Max's printed table [memory]):
        // N = 4, 8, 16 levels: step 0.9957, 0.5860, 0.3352; MSE 0.11885, 0.03744, 0.011543.
        // A mid-rise grid of 2^b levels is Max's uniform quantizer; the rule searches its overload point.
        Tensor x = stratifiedGaussian(1960);
        double[][] table = {{2, 0.9957, 0.11885}, {3, 0.5860, 0.03744}, {4, 0.3352, 0.011543}};
        for (double[] row : table) {
            int bits = (int) row[0];
            Quantized r = Quantizer.linear(bits).midRise().perTensor().range(RangeRule.mse()).apply(x);
            assertEquals(row[1], r.scales().getFlat(0), Fixtures.TABLE_4_DIGITS, bits + " bits step");
            assertEquals(row[2], r.error().mse(), row[2] * 0.01, bits + " bits mse");
        }
    }

    @Test
    void mseRuleFindsTheBestUniformStepsForTheLaplacian() {
        // Source: P. Paez & T. Glisson, IEEE Trans. Commun. COM-20, 1972 / check-values section 1 [computed]:
        // unit-variance Laplacian, best uniform step 1.0874 / 0.7309 / 0.4610 for N = 4 / 8 / 16; MSE 0.19630,
        // 0.07175, 0.02535. Sample tails make the step noisier than for the Gaussian: tolerance 1%.
        Tensor x = laplace(1972);
        double[][] table = {{2, 1.0874, 0.19630}, {3, 0.7309, 0.07175}, {4, 0.4610, 0.02535}};
        for (double[] row : table) {
            int bits = (int) row[0];
            Quantized r = Quantizer.linear(bits).midRise().perTensor().range(RangeRule.mse()).apply(x);
            assertEquals(row[1], r.scales().getFlat(0), 0.01 * row[1], bits + " bits step");
            assertEquals(row[2], r.error().mse(), row[2] * 0.02, bits + " bits mse");
        }
    }

    @Test
    void analyticRulesReproduceTheAciqMultiples() {
        // Source: Banner, Nahshan, Soudry, "Post training 4-bit quantization of convolutional networks for rapid
        // deployment", NeurIPS 2019 (check-values section 2 [computed]; paper prints 2.83, 3.89, 5.03 [memory]):
        // Laplace a/b = 2.831, 3.897, 5.029 and Gaussian a/sigma = 1.711, 2.152, 2.559 at 2, 3, 4 bits.
        // The fitted b and sigma come from 10^6 samples, so the range matches to about 0.5%.
        Tensor lap = laplace(19);
        Tensor gau = gaussian(20);
        double b = 1 / Math.sqrt(2);
        double[][] table = {{2, 2.831, 1.711}, {3, 3.897, 2.152}, {4, 5.029, 2.559}};
        for (double[] row : table) {
            int bits = (int) row[0];
            Quantized l = Quantizer.linear(bits).perTensor().range(RangeRule.laplace()).apply(lap);
            Quantized g = Quantizer.linear(bits).perTensor().range(RangeRule.gaussian()).apply(gau);
            int qmax = (1 << (bits - 1)) - 1;
            // symmetric grid: scale = a / qmax
            assertEquals(row[1] * b, l.scales().getFlat(0) * qmax, 0.005 * row[1] * b, bits + " bits Laplace");
            assertEquals(row[2], g.scales().getFlat(0) * qmax, 0.005 * row[2], bits + " bits Gaussian");
        }
        assertEquals("int4 sym per-tensor aciq-laplace", Quantizer.linear(4).perTensor().range(RangeRule.laplace())
                .label());
    }

    @Test
    void percentileMatchesCommonsMathEstimateR7() {
        // Source: commons-math3 Percentile with EstimationType.R_7 (Hyndman-Fan type 7 = NumPy's "linear").
        float[] v = Fixtures.gaussian(3, 10_001);
        double[] d = new double[v.length];
        double[] abs = new double[v.length];
        for (int i = 0; i < v.length; i++) {
            d[i] = v[i];
            abs[i] = Math.abs(v[i]);
        }
        Percentile p = new Percentile().withEstimationType(Percentile.EstimationType.R_7);
        Tensor x = Tensor.of(v, v.length);
        Quantized asym = Quantizer.linear(8).asymmetric().perTensor().range(RangeRule.percentile(99)).apply(x);
        Quantized sym = Quantizer.linear(8).perTensor().range(RangeRule.percentile(99.9)).apply(x);
        double lo = p.evaluate(d, 1);
        double hi = p.evaluate(d, 99);
        assertEquals((hi - lo) / 255, asym.scales().getFlat(0), 1e-6);
        assertEquals(p.evaluate(abs, 99.9) / 127, sym.scales().getFlat(0), 1e-7);
        assertThrows(IllegalArgumentException.class, () -> RangeRule.percentile(40));
    }

    @Test
    void runningRangeAveragesBatchMinimaAndMaxima() {
        // Hand-computed EMA with momentum 0.5 over three batches (rows) [0, 1], [-2, 3], [1, 1]:
        // min: 0 -> 0.5*0 + 0.5*(-2) = -1 -> 0.5*(-1) + 0.5*1 = 0; max: 1 -> 2 -> 1.5.
        Tensor acts = Tensor.of(new float[] {0f, 1f, -2f, 3f, 1f, 1f}, 3, 2);
        Quantized r = Quantizer.linear(8).asymmetric().unsigned().perTensor().range(RangeRule.running(0.5))
                .apply(acts);
        assertEquals(1.5 / 255, r.scales().getFlat(0), 1e-9);
        assertEquals(0f, r.zeroPoints().getFlat(0));
        // per channel of axis 1 (features): column 0 = 0, -2, 1 -> min and max both 0 -> -1 -> 0 (a zero range,
        // scale 1 by convention); column 1 = 1, 3, 1 -> 1 -> 2 -> 1.5
        Quantized c = Quantizer.linear(8).perChannel(1).range(RangeRule.running(0.5)).apply(acts);
        assertEquals(1f, c.scales().getFlat(0));
        assertEquals(1.5 / 127, c.scales().getFlat(1), 1e-9);
        // two rows per batch: batches [0, 1, -2, 3] and [1, 1]: min -2 -> -0.5, max 3 -> 2
        Quantized two = Quantizer.linear(8).perTensor().range(RangeRule.running(0.5, 2)).apply(acts);
        assertEquals(2.0 / 127, two.scales().getFlat(0), 1e-9);
        assertThrows(IllegalArgumentException.class, () -> RangeRule.running(1.0));
    }

    @Test
    void fixedRangeIsUsedAsGiven() {
        Tensor x = Tensor.of(new float[] {-10f, 0.5f, 10f}, 3);
        Quantized r = Quantizer.linear(8).perTensor().range(RangeRule.fixed(-1, 1)).apply(x);
        assertEquals(1.0 / 127, r.scales().getFlat(0), 1e-9);
        assertEquals(-128, r.codes().get(0), "clipped to qmin");
        assertEquals(127, r.codes().get(2), "clipped");
        assertEquals(RangeRule.fixed(-1, 1), RangeRule.fixed(-1, 1));
        assertNotEquals(RangeRule.fixed(-1, 1), RangeRule.fixed(-1, 2));
    }

    @Test
    void everyRuleWorksPerTensorPerChannelAndPerGroup() {
        Tensor w = Tensor.of(Fixtures.gaussian(31, 16 * 256), 16, 256).withName("w");
        RangeRule[] rules = {RangeRule.minMax(), RangeRule.percentile(99.9), RangeRule.mse(20), RangeRule.entropy(),
            RangeRule.laplace(), RangeRule.gaussian(), RangeRule.running(0.9, 4), RangeRule.fixed(-2, 2)};
        Quantizer[] grans = {Quantizer.linear(4).perTensor(), Quantizer.linear(4).perChannel(0),
            Quantizer.linear(4).perChannel(1).asymmetric(), Quantizer.linear(4).perGroup(1, 64)};
        for (RangeRule rule : rules) {
            for (Quantizer g : grans) {
                if (rule.equals(RangeRule.entropy()) && g.granularity().axis() == 1) {
                    // 16 or 64 values per segment: too few for a histogram (4 bits: 8 levels, 256 values needed)
                    IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                            () -> g.range(rule).apply(w));
                    assertTrue(e.getMessage().startsWith("tensor 'w' ") && e.getMessage().contains(g.range(rule)
                            .label() + "): entropy calibration needs at least 256 values"), e.getMessage());
                    continue;
                }
                Quantized r = g.range(rule).apply(w);
                double rel = r.error().relativeFrobenius();
                // loose bounds: a running average of a few small batches' extremes clips more than min-max does
                assertTrue(rel > 0 && rel < 0.5, g.range(rule) + ": relative error " + rel);
                assertTrue(r.error().sqnrDb() > 6, g.range(rule) + ": sqnr " + r.error().sqnrDb());
                if (rule.equals(RangeRule.minMax()) || rule.equals(RangeRule.mse(20))) {
                    assertTrue(rel < 0.2, g.range(rule) + ": relative error " + rel);
                }
            }
        }
    }

    @Test
    void mseRuleIsNeverWorseThanMinMaxAndClipsHeavyTails() {
        Tensor w = Tensor.of(Fixtures.gaussian(9, 32 * 512), 32, 512);
        for (int bits : new int[] {3, 4, 8}) {
            double minmax = Quantizer.linear(bits).apply(w).error().mse();
            double mse = Quantizer.linear(bits).range(RangeRule.mse()).apply(w).error().mse();
            assertTrue(mse <= minmax, bits + " bits: " + mse + " vs " + minmax);
            if (bits <= 4) {
                assertTrue(mse < 0.8 * minmax, bits + " bits: clipping pays off on Gaussian data");
            }
        }
    }
}
