package dev.rungbook.internal;

/**
 * Fused per-segment kernels for contiguous segments (a whole tensor, a row of a row-major matrix, a group of
 * consecutive elements along the last axis): round, clamp, store the codes and dequantize in a few tight loops over
 * the segment, with results bit for bit those of the plain definitions the quantizer's general path evaluates in
 * double. Internal.
 *
 * <p>Each kernel works mostly in float32 where the float result provably equals the double definition, and redoes in
 * double only the elements where it might not (a quotient on a rounding boundary):
 * <ul>
 *   <li>{@link #linear}: the code is {@code clamp(rint(x / s + z), qmin, qmax)} with the quotient in double and
 *       {@code z} an integer. The float quotient {@code t = fl32(x / s)} rounds to the same integer unless it is
 *       itself a half-integer (rounding is monotone and half-integers below {@code 2^22} are floats; the double
 *       quotient and the addition of {@code z} move the value by far less than its distance to the nearest half
 *       integer), so only float ties are redone. The value is {@code s * (code - z)}, exact in double, so the float
 *       product is the same number.</li>
 *   <li>{@link #levels}: the code is the number of level midpoints {@code mid_j} (double) strictly below the double
 *       quotient {@code x / s}. With {@code lo_j <= mid_j <= hi_j} the float neighbours of {@code mid_j}, a float
 *       quotient above {@code hi_j} means the quotient is above {@code mid_j}, one below {@code lo_j} that it is not;
 *       only a float quotient equal to {@code lo_j} or {@code hi_j} is redone in double. The count runs as a sum of
 *       clamped differences (branch-free, so the JIT vectorises it).</li>
 *   <li>{@link #floatGrid}: the value is the float format's nearest-even value of {@code fl32(x / s)}, saturating
 *       at its largest magnitude, found from the float's bits (normal range: round the bit pattern at the format's
 *       fraction width; below the format's smallest normal: add and subtract {@code 2^(emin - m + 23)}, whose ulp is
 *       the format's subnormal step), and the code is built from the same bits. {@code fl32(fl64(x / s))} equals
 *       {@code fl32(x / s)}: a double quotient of two floats is never exactly halfway between two floats unless the
 *       exact quotient is.</li>
 * </ul>
 */
public final class SegmentKernels {
    private static final float MAGIC = 12582912f; // 1.5 * 2^23
    /** Quotients at least this large in magnitude are redone in double (the magic-number rounding needs less). */
    private static final float ROUND_LIMIT = 4194304f; // 2^22

    private SegmentKernels() {
    }

    // ------------------------------------------------------------------ linear grids

    /**
     * Linear codes of {@code w[off, off + m)}: {@code clamp(rint(w[i] / (double) scale + zero), qmin, qmax)}, stored
     * into {@code bytes} (if non-null) or {@code shorts} at the same index, and the values
     * {@code (float) (scale * (code - zero))} into {@code deq} at the same index.
     *
     * @param scale a positive finite float (subnormal allowed)
     * @param zero an integer-valued zero point within {@code [qmin, qmax]} (or 0)
     * @param qmin smallest code
     * @param qmax largest code
     * @return the number of elements redone in double (float ties and quotients beyond {@code 2^22})
     */
    public static int linear(float[] w, int off, int m, float scale, float zero, int qmin, int qmax, float[] deq,
            byte[] bytes, short[] shorts) {
        int end = off + m;
        float lo = qmin;
        float hi = qmax;
        // float codes; a tie or a quotient too large for the magic-number rounding becomes NaN
        for (int i = off; i < end; i++) {
            float t = w[i] / scale;
            float r = (t + MAGIC) - MAGIC;
            // |t - r| is exact; d is 0 at a float tie and otherwise at most -2^-25, NaN for an infinite quotient
            float d = Math.abs(t - r) - 0.5f;
            // negative (so its square root NaN) at a tie or beyond 2^22, else at least 0
            float flag = Math.min(-d * 0x1p26f - 1f, ROUND_LIMIT - Math.abs(t));
            float c = (r + zero) + 0f * (float) Math.sqrt(flag);
            deq[i] = Math.max(lo, Math.min(hi, c));
        }
        int redo = 0;
        if (bytes != null) {
            for (int i = off; i < end; i++) {
                float c = deq[i];
                bytes[i] = (byte) (int) c;
                redo += c != c ? 1 : 0;
            }
        } else {
            for (int i = off; i < end; i++) {
                float c = deq[i];
                shorts[i] = (short) (int) c;
                redo += c != c ? 1 : 0;
            }
        }
        if (redo > 0) {
            double sc = scale;
            for (int i = off; i < end; i++) {
                if (deq[i] != deq[i]) {
                    double c = Math.rint(w[i] / sc + zero);
                    int code = (int) (c < qmin ? qmin : (c > qmax ? qmax : c)); // an integer: no -0
                    if (bytes != null) {
                        bytes[i] = (byte) code;
                    } else {
                        shorts[i] = (short) code;
                    }
                    deq[i] = code;
                }
            }
        }
        for (int i = off; i < end; i++) {
            deq[i] = (deq[i] - zero) * scale;
        }
        return redo;
    }

    // ------------------------------------------------------------------ fixed levels (NF4)

    /**
     * A table of 16 ascending levels prepared for {@link #levels}: the midpoints in double and their float
     * neighbours.
     */
    public static final class Levels {
        final float[] levels;
        final double[] mids;
        /** {@code hi[j] * SPREAD}, the float at or above midpoint j, spread. */
        final float[] hiSpread;
        /** The float at or below midpoint j; {@code +Infinity} at index 15. */
        final float[] lo;

        private Levels(float[] levels) {
            this.levels = levels.clone();
            mids = new double[15];
            hiSpread = new float[15];
            lo = new float[16];
            for (int j = 0; j < 15; j++) {
                double mid = ((double) levels[j] + levels[j + 1]) / 2;
                mids[j] = mid;
                float f = (float) mid;
                float h = f >= mid ? f : Math.nextUp(f);
                float l = f <= mid ? f : Math.nextDown(f);
                hiSpread[j] = h * SPREAD;
                lo[j] = l;
            }
            lo[15] = Float.POSITIVE_INFINITY;
        }

        /**
         * The table for {@code levels}: 16 ascending floats within [-1, 1] whose midpoints are at least
         * {@code 2^-30} in magnitude and apart (true of NF4).
         *
         * @throws IllegalArgumentException otherwise
         */
        public static Levels of(float[] levels) {
            Checks.require(levels.length == 16, "a level table needs 16 levels, got %d", levels.length);
            for (int j = 0; j < 16; j++) {
                Checks.require(Math.abs(levels[j]) <= 1f && (j == 0 || levels[j] > levels[j - 1]),
                        "levels must ascend within [-1, 1]");
            }
            Levels t = new Levels(levels);
            for (int j = 0; j < 15; j++) {
                Checks.require(Math.abs(t.mids[j]) >= 0x1p-30 && (j == 0 || t.mids[j] - t.mids[j - 1] >= 0x1p-30),
                        "level midpoints must be at least 2^-30 in magnitude and apart");
            }
            return t;
        }
    }

    /**
     * {@code 2^60}: float differences of a quotient within [-1, 1] and a midpoint of at least {@code 2^-30} are
     * multiples of at least {@code 2^-54} when not zero, so their spread is 0 or at least 64 in magnitude (and at most
     * {@code 2^61}).
     */
    private static final float SPREAD = 0x1p60f;

    /**
     * Level codes of {@code w[off, off + m)} with scale {@code scale} (every {@code |w[i] / scale| <= 1}): the code of
     * element {@code i} is the number of midpoints strictly below {@code w[i] / (double) scale}, stored into
     * {@code bytes}, and its value {@code (float) (scale * level)} goes into {@code deq}. {@code y} is scratch of at
     * least {@code m} floats.
     *
     * @return the number of elements redone in double
     */
    public static int levels(float[] w, int off, int m, float scale, Levels table, float[] deq, byte[] bytes,
            float[] y) {
        int end = off + m;
        float[] hs = table.hiSpread;
        float h0 = hs[0], h1 = hs[1], h2 = hs[2], h3 = hs[3], h4 = hs[4], h5 = hs[5], h6 = hs[6], h7 = hs[7];
        float h8 = hs[8], h9 = hs[9], h10 = hs[10], h11 = hs[11], h12 = hs[12], h13 = hs[13], h14 = hs[14];
        for (int i = off, k = 0; i < end; i++, k++) {
            y[k] = w[i] / scale;
        }
        // count of hi_j below the quotient: each term is min(max(spread difference, 0), 1), so 0 or 1
        for (int i = off, k = 0; i < end; i++, k++) {
            float u = y[k] * SPREAD;
            float c = Math.min(Math.max(u - h0, 0f), 1f) + Math.min(Math.max(u - h1, 0f), 1f)
                    + Math.min(Math.max(u - h2, 0f), 1f) + Math.min(Math.max(u - h3, 0f), 1f)
                    + Math.min(Math.max(u - h4, 0f), 1f) + Math.min(Math.max(u - h5, 0f), 1f)
                    + Math.min(Math.max(u - h6, 0f), 1f) + Math.min(Math.max(u - h7, 0f), 1f)
                    + Math.min(Math.max(u - h8, 0f), 1f) + Math.min(Math.max(u - h9, 0f), 1f)
                    + Math.min(Math.max(u - h10, 0f), 1f) + Math.min(Math.max(u - h11, 0f), 1f)
                    + Math.min(Math.max(u - h12, 0f), 1f) + Math.min(Math.max(u - h13, 0f), 1f)
                    + Math.min(Math.max(u - h14, 0f), 1f);
            deq[i] = c;
        }
        float[] lv = table.levels;
        float[] lo = table.lo;
        int redo = 0;
        for (int i = off, k = 0; i < end; i++, k++) {
            int c = (int) deq[i];
            if (y[k] >= lo[c]) {
                // on a midpoint's float neighbour: count in double, as the definition does
                double q = w[i] / (double) scale;
                c = 0;
                for (double mid : table.mids) {
                    c += mid < q ? 1 : 0;
                }
                redo++;
            }
            bytes[i] = (byte) c;
            deq[i] = scale * lv[c];
        }
        return redo;
    }

    // ------------------------------------------------------------------ float formats

    /**
     * Float-format codes of {@code w[off, off + m)}: element {@code i} becomes {@code v}, the nearest-even value of
     * {@code (float) (w[i] / (double) scale)} in a format with {@code exponentBits} exponent bits (bias
     * {@code 2^(e-1) - 1}, smallest normal {@code 2^(1 - bias)}), {@code mantissaBits} fraction bits and largest
     * magnitude {@code max} (saturating); its code
     * (sign, biased exponent, fraction) goes into {@code bytes} or {@code shorts}, and {@code scale * v} into
     * {@code deq}. Values must be finite and {@code scale} positive, so that every quotient is finite.
     */
    public static void floatGrid(float[] w, int off, int m, float scale, int exponentBits, int mantissaBits,
            float max, float[] deq, byte[] bytes, short[] shorts) {
        int end = off + m;
        int bias = (1 << (exponentBits - 1)) - 1;
        int minExponent = 1 - bias;
        float minNormal = Math.scalb(1f, minExponent);
        float magic = Math.scalb(1f, minExponent - mantissaBits + 23);
        int magicBits = Float.floatToRawIntBits(magic);
        int shift = 23 - mantissaBits;
        int half = (1 << (shift - 1)) - 1;
        int mask = -(1 << shift);
        int exponentOffset = (127 - bias) << mantissaBits;
        int signShift = 31 - exponentBits - mantissaBits;
        for (int i = off; i < end; i++) {
            deq[i] = w[i] / scale; // the quotients, replaced by the values below
        }
        for (int i = off; i < end; i++) {
            float x = deq[i];
            int xb = Float.floatToRawIntBits(x);
            float a = Math.min(Math.abs(x), max);
            int code;
            float r;
            if (a < minNormal) {
                float s = a + magic;
                code = Float.floatToRawIntBits(s) - magicBits;
                r = s - magic;
            } else {
                int b = Float.floatToRawIntBits(a);
                int rb = (b + half + ((b >>> shift) & 1)) & mask;
                code = (rb >>> shift) - exponentOffset;
                r = Float.intBitsToFloat(rb);
            }
            int sign = xb & 0x80000000;
            code |= sign >>> signShift;
            float v = Float.intBitsToFloat(Float.floatToRawIntBits(r) | sign);
            deq[i] = scale * v;
            if (bytes != null) {
                bytes[i] = (byte) code;
            } else {
                shorts[i] = (short) code;
            }
        }
    }
}
