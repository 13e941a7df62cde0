package dev.rungbook.range;

/**
 * Chooses the clipping range of each channel, group or tensor. The quantizer gathers the segment's values, asks the
 * rule for a {@link Range}, and derives scale and zero point from it (a symmetric grid uses {@link Range#absMax()}).
 * Every rule works at every granularity, since it sees one segment at a time.
 *
 * <p>The default of every quantizer is {@link #minMax()}. Rules are immutable values with a stable
 * {@link #label()} and value equality.
 */
public interface RangeRule {
    /** A short stable name used in quantizer labels, e.g. {@code minmax}, {@code p99.9}, {@code mse}. */
    String label();

    /**
     * The range for {@code values[from, to)}, the segment's values in order (not modified).
     *
     * @param ctx the grid and segment
     */
    Range range(float[] values, int from, int to, RangeContext ctx);

    /** The segment's minimum and maximum: nothing is clipped. The default. */
    static RangeRule minMax() {
        return MinMaxRule.INSTANCE;
    }

    /** Always {@code [lo, hi]} (for example a range measured elsewhere, or a calibrated activation range). */
    static RangeRule fixed(double lo, double hi) {
        return new FixedRule(new Range(lo, hi));
    }

    /**
     * Percentile clipping: {@code [P(100 - p), P(p)]} of the values, or {@code [-A, A]} with {@code A = P(p)} of the
     * absolute values for a symmetric grid. Percentiles interpolate linearly between order statistics (position
     * {@code (n - 1) p / 100}; the "linear" rule of NumPy's {@code percentile}).
     *
     * @param p the percentile, in (50, 100]
     */
    static RangeRule percentile(double p) {
        return new PercentileRule(p);
    }

    /**
     * Running min-max: the slices of the tensor along axis 0 are batches ({@code rowsPerBatch} rows each, in order),
     * and the range is the exponential moving average of the batch minima and maxima:
     * {@code m_1 = min(batch 1)}, {@code m_t = momentum * m_(t-1) + (1 - momentum) * min(batch t)}, likewise for the
     * maximum. Meant for stacks of captured activations shaped batch x features (per tensor, or per channel on a
     * feature axis); a segment that lies within one batch gets that batch's min and max.
     *
     * @param momentum the weight of the past, in [0, 1) (0.9 is common practice)
     * @param rowsPerBatch how many slices of axis 0 form one batch (at least 1)
     */
    static RangeRule running(double momentum, int rowsPerBatch) {
        return new RunningRule(momentum, rowsPerBatch);
    }

    /** {@link #running(double, int)} with one slice of axis 0 per batch. */
    static RangeRule running(double momentum) {
        return running(momentum, 1);
    }

    /**
     * MSE-optimal clipping: the clip ratio {@code r} in (0, 1] that minimises the squared quantization error of the
     * segment, with the range {@code r * [min, max]} quantized on the actual grid with the actual rounding. Searches
     * 100 evenly spaced ratios, then refines around the best by golden-section search.
     */
    static RangeRule mse() {
        return new MseRule(100, 30);
    }

    /**
     * {@link #mse()} with {@code candidates} evenly spaced ratios before the refinement (fewer is faster and
     * coarser; at least 4).
     */
    static RangeRule mse(int candidates) {
        return new MseRule(candidates, 30);
    }
}
