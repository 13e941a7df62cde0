package dev.rungbook.range;

import dev.rungbook.internal.EntropyCalibration;
import java.util.Arrays;

/** Entropy (KL) calibration of a symmetric threshold on a 2048-bin histogram of |x|. */
final class EntropyRule implements RangeRule {
    static final EntropyRule INSTANCE = new EntropyRule();
    /** Histogram bins (the published procedure's 2048). */
    static final int BINS = EntropyCalibration.DEFAULT_BINS;
    /** Most target levels, so that levels stay well below the bin count. */
    static final int MAX_LEVELS = 1024;
    /**
     * Fewest values per target level: on sparser histograms the divergence minimum is an artefact of empty bins and
     * clips most of the range away (seen with 8 levels and 64 values: 73% relative error).
     */
    static final int MIN_PER_LEVEL = 32;

    private EntropyRule() {
    }

    /** Target levels for a grid of {@code bits} bits: the positive half, {@code 2^(bits-1)}, at most 1024. */
    static int levels(int bits) {
        return bits - 1 >= 10 ? MAX_LEVELS : 1 << Math.max(0, bits - 1);
    }

    @Override
    public String label() {
        return "entropy";
    }

    @Override
    public Range range(float[] values, int from, int to, RangeContext ctx) {
        int levels = levels(ctx.bits());
        if (to - from < MIN_PER_LEVEL * levels) {
            throw new IllegalArgumentException(ctx.label() + ": entropy calibration needs at least "
                    + MIN_PER_LEVEL * levels + " values per segment (" + MIN_PER_LEVEL + " per target level), this one "
                    + "has " + (to - from)
                    + "; use a coarser granularity or another range rule");
        }
        Range full = MinMaxRule.of(values, from, to);
        double maxAbs = full.absMax();
        if (maxAbs == 0) {
            return full;
        }
        float[] v = from == 0 && to == values.length ? values : Arrays.copyOfRange(values, from, to);
        double[] h = EntropyCalibration.histogramOfAbs(v, BINS, maxAbs);
        double t = EntropyCalibration.threshold(h, maxAbs / BINS, levels).threshold();
        t = Math.min(t, maxAbs);
        if (ctx.symmetric()) {
            return new Range(-t, t);
        }
        double lo = Math.max(full.lo(), -t);
        double hi = Math.min(full.hi(), t);
        return new Range(Math.min(lo, hi), Math.max(lo, hi));
    }

    @Override
    public String toString() {
        return label();
    }
}
