package dev.rungbook.tensor;

/**
 * Narrow binary floating-point formats with exact, bit-level conversion from float32.
 *
 * <p>Each format has 1 sign bit, {@link #exponentBits()} exponent bits with bias {@code 2^(e-1) - 1}, and
 * {@link #mantissaBits()} fraction bits, with subnormals. They differ in what the all-ones exponent means:
 * <ul>
 *   <li>{@link #F16}, {@link #BF16}, {@link #E5M2}: IEEE 754 style, infinities and NaNs (IEEE 754 binary16; bfloat16;
 *       OCP 8-bit Floating Point Specification (OFP8) rev. 1.0, E5M2).</li>
 *   <li>{@link #E4M3}: OFP8 E4M3, no infinities; the only NaN is {@code S.1111.111}, so the largest value is
 *       {@code 448 = S.1111.110}.</li>
 *   <li>{@link #E3M2}, {@link #E2M3}, {@link #E2M1}: the OCP Microscaling (MX) v1.0 element formats FP6 and FP4,
 *       which have neither infinities nor NaNs: every code is a finite number.</li>
 * </ul>
 *
 * <p>{@link #round(float)} returns the nearest representable value, ties to even (the code with an even last
 * fraction bit). A value beyond the largest finite one by at least half an ulp of the top binade overflows:
 * to infinity in the IEEE-style formats, to NaN in E4M3 (OFP8's non-saturating mode), and to {@code +-max()} in the
 * MX formats, whose specification converts with saturation. {@link #roundSaturating(float)} clamps every overflow,
 * infinities included, to {@code +-max()}. NaN input gives NaN (which the MX formats cannot {@link #encode}).
 */
public enum FloatFormat {
    /** IEEE binary16: max 65504, min normal 2^-14, min subnormal 2^-24. */
    F16(5, 10, Specials.IEEE),
    /** bfloat16: float32's exponent range with 7 fraction bits. */
    BF16(8, 7, Specials.IEEE),
    /** OFP8 E4M3: max 448, min normal 2^-6, min subnormal 2^-9, no infinities. */
    E4M3(4, 3, Specials.NAN_ONLY),
    /** OFP8 E5M2: max 57344, min normal 2^-14, min subnormal 2^-16, with infinities. */
    E5M2(5, 2, Specials.IEEE),
    /** MX FP6 E3M2: max 28, min normal 0.25, min subnormal 0.0625; no infinities or NaNs. */
    E3M2(3, 2, Specials.NONE),
    /** MX FP6 E2M3: max 7.5, min normal 1, min subnormal 0.125; no infinities or NaNs. */
    E2M3(2, 3, Specials.NONE),
    /** MX FP4 E2M1: values 0, 0.5, 1, 1.5, 2, 3, 4, 6 and their negatives; no infinities or NaNs. */
    E2M1(2, 1, Specials.NONE);

    private enum Specials { IEEE, NAN_ONLY, NONE }

    private final int exponentBits;
    private final int mantissaBits;
    private final Specials specials;
    private final int bias;
    private final int minExponent;
    private final float max;
    private final float minNormal;
    private final float minSubnormal;

    FloatFormat(int exponentBits, int mantissaBits, Specials specials) {
        this.exponentBits = exponentBits;
        this.mantissaBits = mantissaBits;
        this.specials = specials;
        this.bias = (1 << (exponentBits - 1)) - 1;
        this.minExponent = 1 - bias;
        int topField = (1 << exponentBits) - (specials == Specials.IEEE ? 2 : 1);
        double topFraction = specials == Specials.NAN_ONLY
                ? 2.0 - 2.0 * Math.scalb(1.0, -mantissaBits)
                : 2.0 - Math.scalb(1.0, -mantissaBits);
        this.max = (float) Math.scalb(topFraction, topField - bias);
        this.minNormal = (float) Math.scalb(1.0, minExponent);
        this.minSubnormal = (float) Math.scalb(1.0, minExponent - mantissaBits);
    }

    /** Exponent field width. */
    public int exponentBits() {
        return exponentBits;
    }

    /** Fraction (mantissa) field width, without the implicit bit. */
    public int mantissaBits() {
        return mantissaBits;
    }

    /** Total width of a code: 1 + exponent bits + mantissa bits. */
    public int bitWidth() {
        return 1 + exponentBits + mantissaBits;
    }

    /** Exponent bias, {@code 2^(exponentBits-1) - 1}. */
    public int bias() {
        return bias;
    }

    /** The unbiased exponent of the largest binade ({@code emax}), as used by the MX shared-scale rule. */
    public int maxExponent() {
        return Math.getExponent(max);
    }

    /** True if the format encodes infinities. */
    public boolean hasInfinity() {
        return specials == Specials.IEEE;
    }

    /** True if the format encodes NaN. */
    public boolean hasNaN() {
        return specials != Specials.NONE;
    }

    /** The largest finite value. */
    public float max() {
        return max;
    }

    /** The smallest positive normal value, {@code 2^(1-bias)}. */
    public float minNormal() {
        return minNormal;
    }

    /** The smallest positive subnormal value, {@code 2^(1-bias-mantissaBits)}. */
    public float minSubnormal() {
        return minSubnormal;
    }

    /** The nearest representable value, ties to even; overflow as the format's specification says (class doc). */
    public float round(float x) {
        if (this == BF16) {
            return roundBf16(x);
        }
        if (Float.isNaN(x)) {
            return Float.NaN;
        }
        if (Float.isInfinite(x)) {
            return overflow(x);
        }
        float r = roundFinite(x);
        return Math.abs(r) > max ? overflow(x) : r;
    }

    /** Like {@link #round(float)}, but every overflow (infinities included) clamps to {@code +-max()}. */
    public float roundSaturating(float x) {
        if (Float.isNaN(x)) {
            return Float.NaN;
        }
        if (Math.abs(x) >= max) {
            return Math.copySign(max, x);
        }
        float r = this == BF16 ? roundBf16(x) : roundFinite(x);
        return Math.abs(r) > max ? Math.copySign(max, x) : r;
    }

    private float overflow(float x) {
        switch (specials) {
            case IEEE:
                return Math.copySign(Float.POSITIVE_INFINITY, x);
            case NAN_ONLY:
                return Float.NaN;
            default:
                return Math.copySign(max, x);
        }
    }

    /** Round-to-nearest-even onto the format's grid, ignoring the top of the range. Exact in double. */
    private float roundFinite(float x) {
        double a = Math.abs((double) x);
        if (a == 0.0) {
            return x;
        }
        int e = Math.max(Math.getExponent(a), minExponent);
        double q = Math.scalb(Math.rint(Math.scalb(a, mantissaBits - e)), e - mantissaBits);
        return (float) Math.copySign(q, x);
    }

    private static float roundBf16(float x) {
        if (Float.isNaN(x)) {
            return Float.NaN;
        }
        int bits = Float.floatToRawIntBits(x);
        int rounded = (bits + 0x7FFF + ((bits >>> 16) & 1)) & 0xFFFF0000;
        return Float.intBitsToFloat(rounded);
    }

    /**
     * The code of {@code round(x)} in the low {@link #bitWidth()} bits (sign in the top bit). NaN gives the canonical
     * quiet NaN code with the sign of {@code x}.
     *
     * @throws IllegalArgumentException for NaN in a format without NaN
     */
    public int encode(float x) {
        int sign = (Float.floatToRawIntBits(x) >>> 31) << (exponentBits + mantissaBits);
        float r = round(x);
        int allOnes = (1 << exponentBits) - 1;
        if (Float.isNaN(r)) {
            switch (specials) {
                case IEEE:
                    return sign | allOnes << mantissaBits | 1 << (mantissaBits - 1);
                case NAN_ONLY:
                    return sign | allOnes << mantissaBits | ((1 << mantissaBits) - 1);
                default:
                    throw new IllegalArgumentException(this + " has no NaN: cannot encode NaN");
            }
        }
        if (Float.isInfinite(r)) {
            return sign | allOnes << mantissaBits;
        }
        double a = Math.abs((double) r);
        if (a < minNormal) {
            return sign | (int) (a / minSubnormal);
        }
        int e = Math.getExponent(a);
        int fraction = (int) (Math.scalb(a, mantissaBits - e) - Math.scalb(1.0, mantissaBits));
        return sign | (e + bias) << mantissaBits | fraction;
    }

    /**
     * The value of a code (the low {@link #bitWidth()} bits).
     *
     * @throws IllegalArgumentException if {@code bits} has bits set beyond the width
     */
    public float decode(int bits) {
        if ((bits >>> bitWidth()) != 0) {
            throw new IllegalArgumentException(this + ": code 0x" + Integer.toHexString(bits) + " is wider than "
                    + bitWidth() + " bits");
        }
        if (this == BF16) {
            return Float.intBitsToFloat(bits << 16);
        }
        boolean negative = (bits >>> (exponentBits + mantissaBits)) != 0;
        int field = (bits >>> mantissaBits) & ((1 << exponentBits) - 1);
        int fraction = bits & ((1 << mantissaBits) - 1);
        int allOnes = (1 << exponentBits) - 1;
        double v;
        if (field == allOnes && specials == Specials.IEEE) {
            v = fraction == 0 ? Double.POSITIVE_INFINITY : Double.NaN;
        } else if (field == allOnes && specials == Specials.NAN_ONLY && fraction == (1 << mantissaBits) - 1) {
            v = Double.NaN;
        } else if (field == 0) {
            v = fraction * (double) minSubnormal;
        } else {
            v = Math.scalb(1.0 + Math.scalb((double) fraction, -mantissaBits), field - bias);
        }
        return (float) (negative ? -v : v);
    }
}
