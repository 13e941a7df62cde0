package dev.rungbook.internal;

/**
 * Powers {@code a^p} of values {@code a} in {@code [0, 1]} in float32, by a base-2 logarithm and exponential of our
 * own, written so that Java 17's JIT vectorises most of the work. Internal; used by adaptive rounding's regulariser
 * {@code |2h - 1|^beta}, where {@code p} is the same for a whole array and changes every iteration (so a table per
 * value of {@code p} does not pay).
 *
 * <p>Method: {@code a = 2^k m} with {@code m} in {@code [1, 2)} read from the float's bits;
 * {@code ln m = 2 atanh(s)} with {@code s = (m - 1) / (m + 1)} in {@code [0, 1/3)} by its series up to
 * {@code s^13} (truncation below {@code 1e-8}); {@code y = p log2 a}, and {@code 2^y = 2^n e^(r ln 2)} with
 * {@code n} the nearest integer and {@code |r| <= 1/2}, {@code e^u} by its Taylor polynomial of degree 7
 * (truncation below {@code 6e-9} relative), {@code 2^n} built in the float's exponent field. Where
 * {@code y <= -100} the result is 0 (no subnormal results, which cost the processor a slow assist). Relative error
 * against {@code Math.pow} below {@code 1e-5} for {@code p <= 20} and {@code a^p >= 2^-99} (measured maximum in
 * {@code FloatPowTest}; the bound comes from the float32 rounding of {@code y}, about
 * {@code 2^-24 |y| ln 2}). {@code a = 0} is read as {@code 2^-127}: exact (1) for {@code p = 0}, 0 from
 * {@code p >= 0.79}, a tiny positive number in between.
 *
 * <p>Bit reinterpretation ({@link Float#floatToRawIntBits}, {@link Float#intBitsToFloat}) is not vectorised by
 * Java 17's JIT, so it sits in two short scalar loops; the polynomials run in vectorised loops. The scalar forms
 * ({@link #log2}, {@link #exp2}, {@link #pow}) perform the same float operations in the same order, so the array
 * form returns the same bits.
 */
public final class FloatPow {
    /** Below this exponent {@code y = p log2 a} the power is returned as 0. */
    public static final float FLUSH = -100f;
    private static final float STEEP = 0x1p40f;
    /** {@code 1.5 * 2^23}: adding it rounds a float of magnitude below {@code 2^22} to an integer. */
    private static final float ROUNDER = 12582912f;
    private static final int ROUNDER_BITS = 0x4B400000;
    /** {@code 2^23 + 127}: the float {@code 2^23 + e} (biased exponent {@code e}) minus this is the exponent. */
    private static final float EXP_OFFSET = 8388735f;
    private static final float LOG2E = (float) (1 / Math.log(2));
    private static final float LN2 = (float) Math.log(2);

    private FloatPow() {
    }

    /** {@code 2^23 + e} for the biased exponent {@code e} of {@code a} (exact in float). */
    private static float exponentField(float a) {
        return Float.intBitsToFloat(0x4B000000 | (Float.floatToRawIntBits(a) >>> 23));
    }

    /** The mantissa of {@code a} as a float in {@code [1, 2)}. */
    private static float mantissa(float a) {
        return Float.intBitsToFloat((Float.floatToRawIntBits(a) & 0x007FFFFF) | 0x3F800000);
    }

    /** {@code log2} from the exponent field and the mantissa (the arithmetic shared by both forms). */
    private static float log2(float field, float m) {
        float s = (m - 1f) / (m + 1f);
        float z = s * s;
        float series = 1f + z * (1f / 3 + z * (1f / 5 + z * (1f / 7 + z * (1f / 9 + z * (1f / 11 + z * (1f / 13))))));
        return (field - EXP_OFFSET) + (2f * s * series) * LOG2E;
    }

    /** {@code e^(r ln 2)} for {@code |r| <= 1/2}. */
    private static float exp2Fraction(float r) {
        float u = r * LN2;
        return 1f + u * (1f + u * (1f / 2 + u * (1f / 6 + u * (1f / 24 + u * (1f / 120 + u * (1f / 720
                + u * (1f / 5040)))))));
    }

    /** {@code 2^n} for the integer {@code n = rounded - ROUNDER} in {@code [-126, 127]}. */
    private static float twoTo(float rounded) {
        return Float.intBitsToFloat((Float.floatToRawIntBits(rounded) - ROUNDER_BITS + 127) << 23);
    }

    /**
     * {@code log2 a} for a positive normal float {@code a}: error below {@code 3e-7 + 2^-24 |log2 a|} (the series,
     * plus the float rounding of the result) for {@code a} in {@code [2^-126, 2^127]}.
     */
    public static float log2(float a) {
        return log2(exponentField(a), mantissa(a));
    }

    /** {@code 2^y} for {@code y} in {@code [-126, 127]} (relative error below {@code 3e-7} plus the rounding of y). */
    public static float exp2(float y) {
        float rounded = y + ROUNDER;
        float r = y - (rounded - ROUNDER);
        return exp2Fraction(r) * twoTo(rounded);
    }

    /** {@code a^p} for {@code a} in {@code [0, 1]} and {@code p >= 0}, exactly as the array form computes it. */
    public static float pow(float a, float p) {
        float y = Math.max(FLUSH, p * log2(exponentField(a), mantissa(a)));
        float rounded = y + ROUNDER;
        float r = y - (rounded - ROUNDER);
        float head = exp2Fraction(r) * Math.max(0f, Math.min(1f, STEEP * (y - FLUSH)));
        return head * twoTo(rounded);
    }

    /**
     * {@code out[j] = a[j]^p} for {@code j < len}, each {@code a} in {@code [0, 1]}, {@code p >= 0}; the same bits as
     * {@link #pow}. {@code s1} and {@code s2} are scratch arrays of at least {@code len} floats; {@code out} may not
     * overlap {@code a}. (No offsets: Java 17's JIT vectorises a loop only when every array is indexed by the loop
     * variable itself, without an offset that is not a constant.)
     */
    public static void pow(float[] a, float p, float[] out, int len, float[] s1, float[] s2) {
        // Scalar: bits to floats (not vectorised by the JIT).
        for (int j = 0; j < len; j++) {
            float v = a[j];
            s1[j] = exponentField(v);
            s2[j] = mantissa(v);
        }
        // Vectorised: the logarithm and the exponent y.
        for (int j = 0; j < len; j++) {
            out[j] = Math.max(FLUSH, p * log2(s1[j], s2[j]));
        }
        // Vectorised: split y into an integer and a fraction, 2^fraction, the flush mask.
        for (int j = 0; j < len; j++) {
            float y = out[j];
            float rounded = y + ROUNDER;
            float r = y - (rounded - ROUNDER);
            s1[j] = rounded;
            s2[j] = exp2Fraction(r) * Math.max(0f, Math.min(1f, STEEP * (y - FLUSH)));
        }
        // Scalar: 2^n from the bits.
        for (int j = 0; j < len; j++) {
            out[j] = s2[j] * twoTo(s1[j]);
        }
    }
}
