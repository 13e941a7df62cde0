package dev.rungbook.internal;

/**
 * The shared block scale of the OCP Microscaling (MX) formats v1.0: an E8M0 power of two. Internal.
 *
 * <p>{@code shared_exp = floor(log2(max |v|)) - emax_elem}, clamped to the E8M0 range [-127, 127]; the elements are
 * then {@code v / 2^shared_exp} rounded to the element format (done elsewhere). E8M0 stores {@code shared_exp + 127}
 * in 8 bits; code 0xFF is NaN.
 */
public final class MxScale {
    /** Smallest and largest E8M0 exponent. */
    public static final int MIN_EXPONENT = -127;
    /** Largest E8M0 exponent. */
    public static final int MAX_EXPONENT = 127;
    /** The E8M0 NaN code. */
    public static final int NAN_CODE = 0xFF;

    private MxScale() {
    }

    /**
     * The shared exponent of a block whose largest magnitude is {@code maxAbs}, for elements whose largest normal
     * exponent is {@code elementEmax} (E4M3 8, E5M2 15, E3M2 4, E2M3 2, E2M1 2, INT8 0). {@code floor(log2)} is
     * exact (read from the binary exponent; subnormal floats included). An all-zero block ({@code maxAbs == 0}) has no
     * logarithm; it gets the smallest scale, exponent -127, and its elements are zero whatever the scale.
     *
     * @throws IllegalArgumentException if {@code maxAbs} is negative, NaN or infinite
     */
    public static int sharedExponent(float maxAbs, int elementEmax) {
        if (!(maxAbs >= 0) || Float.isInfinite(maxAbs)) {
            throw new IllegalArgumentException("MX block max |v| must be finite and >= 0, got " + maxAbs);
        }
        if (maxAbs == 0) {
            return MIN_EXPONENT;
        }
        int floorLog2 = Math.getExponent((double) maxAbs); // exact for every positive float
        long e = (long) floorLog2 - elementEmax;
        return (int) Math.max(MIN_EXPONENT, Math.min(MAX_EXPONENT, e));
    }

    /** The E8M0 code of {@code exponent} (-127..127): {@code exponent + 127}. */
    public static int encodeE8M0(int exponent) {
        Checks.inRange(exponent, MIN_EXPONENT, MAX_EXPONENT, "E8M0 exponent");
        return exponent + 127;
    }

    /** The value {@code 2^(code - 127)} of an E8M0 code (0..255); 0xFF is NaN. Code 0 is the subnormal 2^-127. */
    public static float decodeE8M0(int code) {
        Checks.inRange(code, 0, 255, "E8M0 code");
        if (code == NAN_CODE) {
            return Float.NaN;
        }
        return Math.scalb(1f, code - 127);
    }

    /** {@code 2^sharedExponent(maxAbs, elementEmax)} as a float. */
    public static float scale(float maxAbs, int elementEmax) {
        return Math.scalb(1f, sharedExponent(maxAbs, elementEmax));
    }
}
