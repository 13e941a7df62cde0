package dev.rungbook.internal;

import java.lang.invoke.MethodHandle;
import java.lang.invoke.MethodType;

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

    private static final MethodHandle V_MIN_MAX;
    private static final MethodHandle V_MAX_ABS;
    private static final MethodHandle V_LINEAR;
    private static final MethodHandle V_LEVELS;

    static {
        MethodHandle[] h = Lanes.vectorMethods("dev.rungbook.internal.VectorSegments",
                "minMax", MethodType.methodType(void.class, float[].class, int.class, int.class, int.class,
                        float[].class, float[].class),
                "maxAbs", MethodType.methodType(void.class, float[].class, int.class, int.class, int.class,
                        float[].class),
                "linear", MethodType.methodType(int.class, float[].class, int.class, int.class, int.class,
                        float[].class, float[].class, int.class, int.class, int.class, float[].class, byte[].class,
                        short[].class, int.class, float[].class),
                "levels", MethodType.methodType(int.class, float[].class, int.class, int.class, int.class,
                        float[].class, int.class, Levels.class, float[].class, byte[].class, int.class,
                        float[].class, double[].class, double[].class),
                "lanes", MethodType.methodType(int.class));
        if (h[0] != null) {
            try {
                Checks.require((int) h[4].invokeExact() == 8, "8 lanes");
            } catch (Throwable e) { // no usable Vector API: the plain loops
                java.util.Arrays.fill(h, null);
            }
        }
        V_MIN_MAX = h[0];
        V_MAX_ABS = h[1];
        V_LINEAR = h[2];
        V_LEVELS = h[3];
    }

    private SegmentKernels() {
    }

    /** True when the run-of-segments kernels run on the Vector API ({@link VectorSegments}). */
    public static boolean vectorised() {
        return V_LINEAR != null;
    }

    // ------------------------------------------------------------------ runs of segments

    /*
     * The methods below work on a run of count contiguous segments of m values each, from off (segment k at
     * off + k * m): one call per run rather than per segment, so that the Vector API forms (VectorSegments) are
     * reached once per run.
     */

    /**
     * {@code lo[k], hi[k]} = the minimum and maximum ({@link Math#min}/{@link Math#max}: {@code -0.0} below
     * {@code 0.0}) of segment {@code k}, for {@code k < count}; for values that are not all finite, at least one of
     * the two is not finite.
     */
    public static void minMax(float[] w, int off, int count, int m, float[] lo, float[] hi) {
        if (V_MIN_MAX != null) {
            try {
                V_MIN_MAX.invokeExact(w, off, count, m, lo, hi);
                return;
            } catch (Throwable e) {
                throw Lanes.unchecked(e);
            }
        }
        scalarMinMax(w, off, count, m, lo, hi);
    }

    /**
     * {@link #minMax} as plain loops: the floats ordered as integers ({@code b ^ ((b >> 31) & 0x7FFFFFFF)} of their
     * bits orders every float as {@link Math#min} does, {@code -0.0} below {@code 0.0}), in four independent
     * accumulators, which the processor overlaps (a float {@code Math.min} chain waits for each step); a NaN or an
     * infinity gives a non-finite end.
     */
    static void scalarMinMax(float[] w, int off, int count, int m, float[] lo, float[] hi) {
        for (int k = 0; k < count; k++) {
            int base = off + k * m;
            int end = base + m;
            int a0 = Integer.MAX_VALUE;
            int a1 = Integer.MAX_VALUE;
            int a2 = Integer.MAX_VALUE;
            int a3 = Integer.MAX_VALUE;
            int b0 = Integer.MIN_VALUE;
            int b1 = Integer.MIN_VALUE;
            int b2 = Integer.MIN_VALUE;
            int b3 = Integer.MIN_VALUE;
            int i = base;
            for (; i + 4 <= end; i += 4) {
                int x0 = ordered(w[i]);
                int x1 = ordered(w[i + 1]);
                int x2 = ordered(w[i + 2]);
                int x3 = ordered(w[i + 3]);
                a0 = Math.min(a0, x0);
                a1 = Math.min(a1, x1);
                a2 = Math.min(a2, x2);
                a3 = Math.min(a3, x3);
                b0 = Math.max(b0, x0);
                b1 = Math.max(b1, x1);
                b2 = Math.max(b2, x2);
                b3 = Math.max(b3, x3);
            }
            for (; i < end; i++) {
                int x = ordered(w[i]);
                a0 = Math.min(a0, x);
                b0 = Math.max(b0, x);
            }
            int a = Math.min(Math.min(a0, a1), Math.min(a2, a3));
            int b = Math.max(Math.max(b0, b1), Math.max(b2, b3));
            // an empty segment: the starting values of a plain loop
            lo[k] = m == 0 ? Float.POSITIVE_INFINITY : Float.intBitsToFloat(ordered(a));
            hi[k] = m == 0 ? Float.NEGATIVE_INFINITY : Float.intBitsToFloat(ordered(b));
        }
    }

    /** The float's bits as an int that orders floats (an involution on the bit patterns). */
    private static int ordered(float x) {
        int b = Float.floatToRawIntBits(x);
        return b ^ ((b >> 31) & 0x7FFFFFFF);
    }

    private static int ordered(int b) {
        return b ^ ((b >> 31) & 0x7FFFFFFF);
    }

    /**
     * {@code amax[k]} = the largest {@code |x|} of segment {@code k} (at least 0), for {@code k < count}; NaN or
     * infinite if a value is.
     */
    public static void maxAbs(float[] w, int off, int count, int m, float[] amax) {
        if (V_MAX_ABS != null) {
            try {
                V_MAX_ABS.invokeExact(w, off, count, m, amax);
                return;
            } catch (Throwable e) {
                throw Lanes.unchecked(e);
            }
        }
        scalarMaxAbs(w, off, count, m, amax);
    }

    /**
     * {@link #maxAbs} as plain loops: magnitudes order as their bit patterns (NaN above infinity), in four
     * independent integer accumulators.
     */
    static void scalarMaxAbs(float[] w, int off, int count, int m, float[] amax) {
        for (int k = 0; k < count; k++) {
            int base = off + k * m;
            int end = base + m;
            int b0 = 0;
            int b1 = 0;
            int b2 = 0;
            int b3 = 0;
            int i = base;
            for (; i + 4 <= end; i += 4) {
                b0 = Math.max(b0, Float.floatToRawIntBits(w[i]) & 0x7FFFFFFF);
                b1 = Math.max(b1, Float.floatToRawIntBits(w[i + 1]) & 0x7FFFFFFF);
                b2 = Math.max(b2, Float.floatToRawIntBits(w[i + 2]) & 0x7FFFFFFF);
                b3 = Math.max(b3, Float.floatToRawIntBits(w[i + 3]) & 0x7FFFFFFF);
            }
            for (; i < end; i++) {
                b0 = Math.max(b0, Float.floatToRawIntBits(w[i]) & 0x7FFFFFFF);
            }
            amax[k] = Float.intBitsToFloat(Math.max(Math.max(b0, b1), Math.max(b2, b3)));
        }
    }

    /**
     * {@link #linear} for each of {@code count} segments, segment {@code k} with scale {@code scales[s0 + k]} and
     * zero point {@code zeros[s0 + k]} (0 if {@code zeros} is null); every scale positive and finite.
     *
     * @return the number of elements redone in double
     */
    public static int linear(float[] w, int off, int count, int m, float[] scales, float[] zeros, int s0, int qmin,
            int qmax, float[] deq, byte[] bytes, short[] shorts) {
        return linear(w, off, count, m, scales, zeros, s0, qmin, qmax, deq, bytes, shorts, 0, null);
    }

    /**
     * {@link #linear(float[], int, int, int, float[], float[], int, int, int, float[], byte[], short[])}, and
     * {@link #maxAbs} of the first {@code nextCount} segments of the next run (the {@code nextCount <= count}
     * segments from {@code off + count * m}) into {@code nextAmax}: on the Vector API in the same pass, so that the
     * next run is read from memory while this one is quantized.
     *
     * @return the number of elements redone in double
     */
    public static int linear(float[] w, int off, int count, int m, float[] scales, float[] zeros, int s0, int qmin,
            int qmax, float[] deq, byte[] bytes, short[] shorts, int nextCount, float[] nextAmax) {
        checkAhead(count, nextCount);
        if (V_LINEAR != null) {
            try {
                return (int) V_LINEAR.invokeExact(w, off, count, m, scales, zeros, s0, qmin, qmax, deq, bytes,
                        shorts, nextCount, nextAmax);
            } catch (Throwable e) {
                throw Lanes.unchecked(e);
            }
        }
        int redo = scalarLinear(w, off, count, m, scales, zeros, s0, qmin, qmax, deq, bytes, shorts);
        scalarMaxAbs(w, off + count * m, nextCount, m, nextAmax);
        return redo;
    }

    private static void checkAhead(int count, int nextCount) {
        Checks.require(nextCount >= 0 && nextCount <= count, "the next run has %d segments, this one %d", nextCount,
                count);
    }

    /** {@link #linear(float[], int, int, int, float[], float[], int, int, int, float[], byte[], short[])}, plain. */
    static int scalarLinear(float[] w, int off, int count, int m, float[] scales, float[] zeros, int s0, int qmin,
            int qmax, float[] deq, byte[] bytes, short[] shorts) {
        int redo = 0;
        for (int k = 0; k < count; k++) {
            redo += linear(w, off + k * m, m, scales[s0 + k], zeros == null ? 0f : zeros[s0 + k], qmin, qmax, deq,
                    bytes, shorts);
        }
        return redo;
    }

    /**
     * {@link #levels(float[], int, int, float, Levels, float[], byte[], float[])} for each of {@code count}
     * segments, segment {@code k} with scale {@code scales[s0 + k]} (positive, finite, at least every
     * {@code |x|} of its segment); {@code y} is scratch of at least {@code min(m, 4096)} floats.
     *
     * @return the number of elements counted in double
     */
    public static int levels(float[] w, int off, int count, int m, float[] scales, int s0, Levels table, float[] deq,
            byte[] bytes, float[] y) {
        return levels(w, off, count, m, scales, s0, table, deq, bytes, y, 0, null);
    }

    /**
     * {@link #levels(float[], int, int, int, float[], int, Levels, float[], byte[], float[])} and, as
     * {@link #linear(float[], int, int, int, float[], float[], int, int, int, float[], byte[], short[], int,
     * float[])} does, the largest magnitudes of the next run's first {@code nextCount} segments.
     *
     * @return the number of elements counted in double
     */
    public static int levels(float[] w, int off, int count, int m, float[] scales, int s0, Levels table, float[] deq,
            byte[] bytes, float[] y, int nextCount, float[] nextAmax) {
        return levels(w, off, count, m, scales, s0, table, deq, bytes, y, nextCount, nextAmax, null, null);
    }

    /**
     * {@link #levels(float[], int, int, int, float[], int, Levels, float[], byte[], float[], int, float[])} and the
     * segments' error sums of {@code Fused.segmentSums} into {@code sqErr} and {@code sqSignal} (either or both may
     * be null), the same bits; with the Vector API module the NF4 kernel forms them while each segment's values are
     * still in the level-1 cache instead of in a second pass over the run.
     *
     * @return the number of elements counted in double
     */
    public static int levels(float[] w, int off, int count, int m, float[] scales, int s0, Levels table, float[] deq,
            byte[] bytes, float[] y, int nextCount, float[] nextAmax, double[] sqErr, double[] sqSignal) {
        checkAhead(count, nextCount);
        if (V_LEVELS != null) {
            try {
                return (int) V_LEVELS.invokeExact(w, off, count, m, scales, s0, table, deq, bytes, nextCount,
                        nextAmax, sqErr, sqSignal);
            } catch (Throwable e) {
                throw Lanes.unchecked(e);
            }
        }
        int redo = scalarLevels(w, off, count, m, scales, s0, table, deq, bytes, y);
        scalarMaxAbs(w, off + count * m, nextCount, m, nextAmax);
        if (sqErr != null || sqSignal != null) {
            Fused.segmentSums(w, deq, off, count, m, scales, s0, sqErr, sqSignal);
        }
        return redo;
    }

    /** {@link #levels(float[], int, int, int, float[], int, Levels, float[], byte[], float[])}, plain. */
    static int scalarLevels(float[] w, int off, int count, int m, float[] scales, int s0, Levels table, float[] deq,
            byte[] bytes, float[] y) {
        int redo = 0;
        int chunk = Math.min(m, 4096);
        for (int k = 0; k < count; k++) {
            int base = off + k * m;
            for (int c = 0; c < m; c += chunk) {
                redo += levels(w, base + c, Math.min(chunk, m - c), scales[s0 + k], table, deq, bytes, y);
            }
        }
        return redo;
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
     * @return the number of elements redone in double (float ties)
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
            // Below 2^22, |t - r| is exact and d is 0 at a float tie and otherwise at most -2^-25; the square root
            // of -d * 2^26 - 1 is NaN exactly at a tie (and for an infinite quotient), so the code becomes NaN.
            // Beyond 2^22 the rounding is not exact, but r keeps the sign and magnitude of t, so the code is clamped
            // to the same end as the definition's (a spurious tie there is only redone).
            float d = Math.abs(t - r) - 0.5f;
            float c = (r + zero) + 0f * (float) Math.sqrt(-d * 0x1p26f - 1f);
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

    /** Buckets per unit of the quotient in the level table: {@code 2 * BUCKETS + 1} buckets cover [-1, 1]. */
    private static final int BUCKETS = 4096;

    /**
     * A table of ascending levels within [-1, 1] prepared for {@link #levels}: the midpoints in double, and for each
     * bucket {@code b = (int) ((y + 1) * 4096)} of the float quotient {@code y} the code every quotient of that
     * bucket has, or -1 for the few buckets that hold a midpoint's float neighbour (where the count is done in
     * double, as the definition does). The bucket function is monotone in {@code y} (float addition and
     * multiplication by a positive constant are), so a bucket is an interval of floats, and a bucket without a
     * midpoint's neighbour has one count.
     */
    public static final class Levels {
        final float[] levels;
        final double[] mids;
        /** Code per bucket, -1 where the double count decides. */
        final byte[] codes;
        /**
         * For {@link VectorSegments}' eight-lane kernel: per bucket {@code b = rint((y + 1) * VECTOR_BUCKETS)} of the
         * float quotient {@code y} (rounded to nearest even, so monotone in {@code y}), one 64-bit entry: in the high
         * 32 bits the code every quotient of the bucket has, or -1 where a midpoint's float neighbour lies in the
         * bucket (so such an entry is negative); in the low 32 the bits of that code's level (0 for -1).
         */
        final long[] vectorEntries;

        private Levels(float[] levels, double[] decisions) {
            this.levels = levels.clone();
            int k = levels.length;
            mids = new double[k - 1];
            for (int j = 0; j < k - 1; j++) {
                mids[j] = decisions != null ? decisions[j] : ((double) levels[j] + levels[j + 1]) / 2;
            }
            codes = new byte[2 * BUCKETS + 1];
            for (int b = 0; b < codes.length; b++) {
                float rep = (b + 0.5f) / BUCKETS - 1f;
                codes[b] = bucket(rep) == b ? (byte) count(mids, rep) : -1;
            }
            for (double mid : mids) {
                float f = (float) mid;
                float lo = f <= mid ? f : Math.nextDown(f);
                float hi = f >= mid ? f : Math.nextUp(f);
                for (int b = bucket(lo); b <= bucket(hi); b++) {
                    codes[b] = -1;
                }
            }
            int[] vectorCodes = new int[2 * VECTOR_BUCKETS + 1];
            for (int b = 0; b < vectorCodes.length; b++) {
                float rep = (float) b / VECTOR_BUCKETS - 1f;
                vectorCodes[b] = vectorBucket(rep) == b ? count(mids, rep) : -1;
            }
            for (double mid : mids) {
                float f = (float) mid;
                float lo = f <= mid ? f : Math.nextDown(f);
                float hi = f >= mid ? f : Math.nextUp(f);
                for (int b = vectorBucket(lo); b <= vectorBucket(hi); b++) {
                    vectorCodes[b] = -1;
                }
            }
            int[][] perm = permutationTables(levels, mids);
            permBase = perm == null ? null : perm[0];
            permThreshold = perm == null ? null : perm[1];
            permLevels = perm == null ? null : perm[2];
            vectorEntries = new long[vectorCodes.length];
            for (int b = 0; b < vectorCodes.length; b++) {
                float level = vectorCodes[b] < 0 ? 0f : levels[vectorCodes[b]];
                vectorEntries[b] = ((long) vectorCodes[b] << 32) | (Float.floatToRawIntBits(level) & 0xFFFF_FFFFL);
            }
        }

        /**
         * For {@link VectorSegments}' sixteen-lane kernel, or {@code null} where it does not apply (more than 16
         * levels, or two decision points near one of its buckets). That kernel never forms the float quotient: it
         * takes {@code u = x * r} with {@code r = fl(1 / s)} (so {@code |u - x / s| <= 2^-24} for {@code |x / s| <= 1})
         * and the bucket {@code b = rint(x * fl(15 * r) + 15)} (0..30, one fused multiply-add), whose quotients all
         * lie within {@link #permInterval} of it. Per bucket: the number of decision points below every such
         * quotient ({@code permBase}), the float nearest the one decision point near the bucket
         * ({@code permThreshold}, as bits; 2.0 where there is none), and the levels' bits padded to 16
         * ({@code permLevels}). The code is {@code permBase[b] + (fl(t - u) < 0 ? 1 : 0)} with {@code t} the
         * threshold, except where {@code |fl(t - u)| <= 2^-21}, which the kernel counts in double: beyond that
         * distance {@code t - u} has the sign of {@code mid - x / s} ({@code |t - mid| <= 2^-25}).
         */
        final int[] permBase;
        final int[] permThreshold;
        final int[] permLevels;

        /** Entries of the sixteen-lane kernel's bucket tables (buckets 0..30; entry 31 repeats 30). */
        static final int PERM_BUCKETS = 32;

        /**
         * The quotients {@code x / s} whose sixteen-lane bucket is {@code b}: those within {@code 2^-16} of
         * [{@code (b - 0.5) / 15 - 1}, {@code (b + 0.5) / 15 - 1}] include every one (the bucket's argument
         * {@code x * fl(15 * fl(1 / s)) + 15} is within {@code 15 * 2^-23} of {@code 15 * (x / s + 1)}).
         */
        static double[] permInterval(int b) {
            double slack = 0x1p-16;
            return new double[] {(b - 0.5) / 15 - 1 - slack, (b + 0.5) / 15 - 1 + slack};
        }

        /** {@link #permBase}, {@link #permThreshold} and {@link #permLevels}, or null where they do not apply. */
        private static int[][] permutationTables(float[] levels, double[] mids) {
            if (levels.length > 16) {
                return null;
            }
            int[] base = new int[PERM_BUCKETS];
            int[] threshold = new int[PERM_BUCKETS];
            for (int b = 0; b < PERM_BUCKETS; b++) {
                double[] q = permInterval(Math.min(b, PERM_BUCKETS - 2));
                int near = -1;
                for (int j = 0; j < mids.length; j++) {
                    if (mids[j] < q[0]) {
                        base[b]++;
                    } else if (mids[j] <= q[1]) {
                        if (near >= 0) {
                            return null; // two decision points near one bucket
                        }
                        near = j;
                    }
                }
                threshold[b] = Float.floatToRawIntBits(near < 0 ? 2f : (float) mids[near]);
            }
            int[] lv = new int[16];
            for (int j = 0; j < 16; j++) {
                lv[j] = Float.floatToRawIntBits(levels[Math.min(j, levels.length - 1)]);
            }
            return new int[][] {base, threshold, lv};
        }

        /** Buckets per unit of the quotient in the vector tables ({@code 2 * VECTOR_BUCKETS + 1} cover [-1, 1]). */
        static final int VECTOR_BUCKETS = 2048;

        /** The vector kernel's bucket of {@code y}: {@code rint((y + 1) * VECTOR_BUCKETS)}, computed as it does. */
        static int vectorBucket(float y) {
            return Float.floatToRawIntBits((y + 1f) * VECTOR_BUCKETS + MAGIC) - Float.floatToRawIntBits(MAGIC);
        }

        /**
         * The table for {@code levels}: 2 to 128 ascending floats within [-1, 1].
         *
         * @throws IllegalArgumentException otherwise
         */
        public static Levels of(float[] levels) {
            Checks.require(levels.length >= 2 && levels.length <= 128, "a level table needs 2 to 128 levels, got %d",
                    levels.length);
            for (int j = 0; j < levels.length; j++) {
                Checks.require(Math.abs(levels[j]) <= 1f && (j == 0 || levels[j] > levels[j - 1]),
                        "levels must ascend within [-1, 1]");
            }
            return new Levels(levels, null);
        }

        /**
         * A table whose decision points are {@code mids} (ascending doubles within [-1, 1], {@code levels.length - 1}
         * of them) rather than the midpoints of the float levels: a value's code is the number of {@code mids}
         * strictly below it, its value that code's level.
         *
         * @throws IllegalArgumentException for levels as {@link #of(float[])} refuses, or mids out of order or range
         */
        public static Levels of(float[] levels, double[] mids) {
            of(levels); // checks the levels
            Checks.require(mids.length == levels.length - 1, "%d levels need %d decision points, got %d",
                    levels.length, levels.length - 1, mids.length);
            for (int j = 0; j < mids.length; j++) {
                Checks.require(Math.abs(mids[j]) <= 1 && (j == 0 || mids[j] >= mids[j - 1]),
                        "decision points must ascend within [-1, 1]");
            }
            return new Levels(levels, mids);
        }
    }

    private static int bucket(float y) {
        return (int) ((y + 1f) * BUCKETS);
    }

    /** The number of {@code mids} strictly below {@code y} (the definition). */
    static int count(double[] mids, double y) {
        int c = 0;
        for (double mid : mids) {
            c += mid < y ? 1 : 0;
        }
        return c;
    }

    /**
     * Level codes of {@code w[off, off + m)} with scale {@code scale} (every {@code |w[i] / scale| <= 1}): the code of
     * element {@code i} is the number of midpoints strictly below {@code w[i] / (double) scale}, stored into
     * {@code bytes}, and its value {@code (float) (scale * level)} goes into {@code deq}. {@code y} is scratch of at
     * least {@code m} floats.
     *
     * @return the number of elements counted in double
     */
    public static int levels(float[] w, int off, int m, float scale, Levels table, float[] deq, byte[] bytes,
            float[] y) {
        // the buckets' float arguments, (q + 1) * BUCKETS, as bucket() computes them; |q| <= 1 keeps them in range
        for (int k = 0; k < m; k++) {
            y[k] = (w[off + k] / scale + 1f) * BUCKETS;
        }
        float[] lv = table.levels;
        byte[] codes = table.codes;
        int redo = 0;
        for (int k = 0; k < m; k++) {
            int c = codes[(int) y[k]];
            if (c < 0) {
                c = count(table.mids, w[off + k] / (double) scale);
                redo++;
            }
            bytes[off + k] = (byte) c;
            deq[off + k] = scale * lv[c];
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
        // magnitudes compare as their bit patterns (non-negative floats order like their bits as ints)
        int maxBits = Float.floatToRawIntBits(max);
        int minNormalBits = Float.floatToRawIntBits(minNormal);
        for (int i = off; i < end; i++) {
            int xb = Float.floatToRawIntBits(deq[i]);
            int sign = xb & 0x80000000;
            int ab = Math.min(xb & 0x7FFFFFFF, maxBits); // saturate
            int rb = (ab + half + ((ab >>> shift) & 1)) & mask; // nearest even at the format's fraction width
            int code = (rb >>> shift) - exponentOffset;
            if (ab < minNormalBits) { // the format's subnormal range: its step is the ulp of magic
                float sum = Float.intBitsToFloat(ab) + magic;
                code = Float.floatToRawIntBits(sum) - magicBits;
                rb = Float.floatToRawIntBits(sum - magic);
            }
            code |= sign >>> signShift;
            deq[i] = scale * Float.intBitsToFloat(rb | sign);
            if (bytes != null) {
                bytes[i] = (byte) code;
            } else {
                shorts[i] = (short) code;
            }
        }
    }
}
