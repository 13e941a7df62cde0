package dev.rungbook.round;

/**
 * A rounding rule applied to each element on its own.
 *
 * <p>{@link #round(double, long)} receives {@code x / s + z} (the value divided by its scale, plus its zero point)
 * and the element's flat row-major index in the tensor, and returns an integer-valued double; the quantizer clamps it
 * to the grid's code range. The index lets seeded random rules be reproducible regardless of visiting order.
 */
public interface ElementRounding extends Rounding {
    /** The rounded, integer-valued image of {@code scaled} for the element at flat index {@code index}. */
    double round(double scaled, long index);
}
