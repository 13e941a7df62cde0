package dev.rungbook.range;

import dev.rungbook.internal.AnalyticClipping;

/** ACIQ analytic clipping for Laplace and Gaussian sources. */
enum AnalyticRule implements RangeRule {
    LAPLACE("aciq-laplace"),
    GAUSSIAN("aciq-gaussian");

    private final String label;

    AnalyticRule(String label) {
        this.label = label;
    }

    @Override
    public String label() {
        return label;
    }

    @Override
    public Range range(float[] values, int from, int to, RangeContext ctx) {
        Range full = MinMaxRule.of(values, from, to);
        int m = to - from;
        if (m == 0 || full.lo() == full.hi()) {
            return full;
        }
        double mean = 0;
        for (int i = from; i < to; i++) {
            mean += values[i];
        }
        mean /= m;
        double spread = 0;
        for (int i = from; i < to; i++) {
            double d = values[i] - mean;
            spread += this == LAPLACE ? Math.abs(d) : d * d;
        }
        spread = this == LAPLACE ? spread / m : Math.sqrt(spread / m);
        int bits = Math.max(1, Math.min(16, ctx.bits()));
        double ratio = this == LAPLACE ? AnalyticClipping.laplaceClipRatio(bits)
                : AnalyticClipping.gaussianClipRatio(bits);
        double lo = Math.max(full.lo(), mean - ratio * spread);
        double hi = Math.min(full.hi(), mean + ratio * spread);
        return lo <= hi ? new Range(lo, hi) : full;
    }

    @Override
    public String toString() {
        return label;
    }
}
