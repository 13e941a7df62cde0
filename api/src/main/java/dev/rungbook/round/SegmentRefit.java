package dev.rungbook.round;

/**
 * Refits the grid of one segment (a channel or group) from the values it holds now: the quantizer's own range rule
 * and scale logic, handed to a rule that changes weights before it rounds them. Error-feedback rounding uses it to
 * compute a group's scale from the updated weights when it reaches the group, as the published method does.
 */
@FunctionalInterface
public interface SegmentRefit {
    /**
     * The {@code {scale, zeroPoint}} of a segment holding {@code values[from, to)}.
     *
     * @param values the segment's current values (not modified)
     */
    float[] fit(float[] values, int from, int to);
}
