package dev.rungbook.range;

/**
 * What a {@link RangeRule} may know about the grid and the segment (channel, group or whole tensor) it chooses a
 * range for. Supplied by the quantizer.
 */
public interface RangeContext {
    /** Names the tensor, segment and spec, for messages, e.g. {@code tensor 'fc1.weight' channel 3 (int4 sym ...)}. */
    String label();

    /** The width of a code in bits (for analytic rules, which are indexed by bits). */
    int bits();

    /** True if the grid is symmetric about zero: only {@link Range#absMax()} of the returned range matters. */
    boolean symmetric();

    /** The shape of the tensor being quantized (a copy). */
    int[] shape();

    /** The flat row-major index in the tensor of element {@code j} of the segment (increasing in {@code j}). */
    int flatIndex(int j);

    /**
     * The sum of squared errors of {@code values[from, to)} (this segment's values, in order) when quantized with the
     * clipping range {@code range} on the actual grid with the actual element rounding (rules that work on a whole
     * layer are replaced by round-to-nearest here).
     */
    double squaredError(float[] values, int from, int to, Range range);
}
