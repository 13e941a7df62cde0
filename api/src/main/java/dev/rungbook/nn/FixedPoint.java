package dev.rungbook.nn;

/**
 * A real multiplier {@code M > 0} as integer-only hardware applies it: {@code M = M0 * 2^-n} with {@code M0} in
 * [0.5, 1) stored as a Q31 integer {@code round(M0 * 2^31)}, applied to an int32 accumulator by a saturating rounding
 * doubling high multiply followed by a rounding right shift (ties away from zero), as in the integer-only inference
 * scheme of Jacob et al. (CVPR 2018). Multipliers of 1 or more get a negative {@code n}; they are applied as one
 * 64-bit product rounded half up and saturated to int32.
 *
 * <p>The result differs from {@code acc * M} rounded to nearest by at most 1 (two roundings).
 */
public final class FixedPoint {
    private final double real;
    private final int multiplier;
    private final int shift;

    private FixedPoint(double real, int multiplier, int shift) {
        this.real = real;
        this.multiplier = multiplier;
        this.shift = shift;
    }

    /**
     * Decomposes {@code realMultiplier} into a Q31 multiplier and a shift.
     *
     * @throws IllegalArgumentException unless {@code 0 < realMultiplier < 2^31} and finite, or if it is so small
     *     that the shift exceeds 62 (the product rounds to 0 for every int32 accumulator anyway)
     */
    public static FixedPoint of(double realMultiplier) {
        if (!(realMultiplier > 0) || !(realMultiplier < 0x1p31)) {
            throw new IllegalArgumentException("fixed-point multiplier must be in (0, 2^31), got " + realMultiplier);
        }
        int exponent = Math.getExponent(realMultiplier) + 1; // M = M0 * 2^exponent, M0 in [0.5, 1)
        double m0 = Math.scalb(realMultiplier, -exponent);
        long q = Math.round(m0 * 0x1p31);
        if (q == (1L << 31)) { // M0 rounded up to 1.0
            q = 1L << 30;
            exponent++;
        }
        int n = -exponent;
        if (n > 62) {
            throw new IllegalArgumentException("fixed-point multiplier " + realMultiplier
                    + " is too small: shift " + n + " exceeds 62");
        }
        return new FixedPoint(realMultiplier, (int) q, n);
    }

    /** The real multiplier this was made from. */
    public double realMultiplier() {
        return real;
    }

    /** {@code M0} as a Q31 integer, in [2^30, 2^31). */
    public int multiplier() {
        return multiplier;
    }

    /** {@code n} in {@code M = M0 * 2^-n}; negative for multipliers of 1 or more. */
    public int shift() {
        return shift;
    }

    /** {@code acc * M}, computed with integer operations only. */
    public int apply(int accumulator) {
        if (shift > 31) {
            return 0; // |high product| < 2^31, so the quotient is below 1/2 in magnitude
        }
        if (shift >= 0) {
            return roundingDivideByPowerOfTwo(saturatingRoundingDoublingHighMul(accumulator, multiplier), shift);
        }
        // M >= 1: the product a * M0 / 2^(31 + n) with 31 + n in [0, 31), rounded half up, then saturated.
        int down = 31 + shift;
        long ab = (long) accumulator * multiplier;
        long rounded = down == 0 ? ab : (ab + (1L << (down - 1))) >> down;
        return (int) Math.max(Integer.MIN_VALUE, Math.min(Integer.MAX_VALUE, rounded));
    }

    /**
     * {@code acc * M} with one rounding instead of two: the 64-bit product {@code acc * M0} shifted right by
     * {@code 31 + n} with rounding to nearest, ties away from zero, saturated to int32. Integer operations only; the
     * result is {@code acc * M0q * 2^-(31+n)} rounded once, so it differs from {@code acc * M} rounded to nearest
     * only through the Q31 rounding of {@code M0} (relative error below 2^-31), where {@link #apply} can be one off
     * whenever {@code n} is small (its first rounding is to a step of {@code 2^-n} of the result).
     */
    public int applySingleRounding(int accumulator) {
        int k = 31 + shift;
        long ab = (long) accumulator * multiplier;
        if (k > 62) {
            return 0; // |ab| < 2^62, so |ab / 2^k| < 1/2
        }
        long r;
        if (k == 0) {
            r = ab;
        } else {
            long half = 1L << (k - 1);
            r = ab >= 0 ? (ab + half) >> k : -((half - ab) >> k);
        }
        return (int) Math.max(Integer.MIN_VALUE, Math.min(Integer.MAX_VALUE, r));
    }

    /**
     * The high 32 bits of {@code 2 * a * b}, rounded: a nudge of 2^30 (non-negative product) or {@code 1 - 2^30}
     * (negative) is added to {@code a * b} before dividing by 2^31 with truncation. Only
     * {@code INT32_MIN * INT32_MIN} saturates, to {@code INT32_MAX}.
     */
    public static int saturatingRoundingDoublingHighMul(int a, int b) {
        if (a == Integer.MIN_VALUE && b == Integer.MIN_VALUE) {
            return Integer.MAX_VALUE;
        }
        long ab = (long) a * b;
        long nudge = ab >= 0 ? 1L << 30 : 1 - (1L << 30);
        return (int) ((ab + nudge) / (1L << 31));
    }

    /** {@code x / 2^exponent} rounded to nearest, ties away from zero; {@code exponent} in [0, 31]. */
    public static int roundingDivideByPowerOfTwo(int x, int exponent) {
        if (exponent < 0 || exponent > 31) {
            throw new IllegalArgumentException("exponent must be in [0, 31], got " + exponent);
        }
        if (exponent == 0) {
            return x;
        }
        int mask = (int) ((1L << exponent) - 1);
        int remainder = x & mask;
        int threshold = (mask >> 1) + (x < 0 ? 1 : 0);
        return (x >> exponent) + (remainder > threshold ? 1 : 0);
    }

    @Override
    public String toString() {
        return "FixedPoint M=" + real + " (M0=" + multiplier + " / 2^31, n=" + shift + ")";
    }
}
