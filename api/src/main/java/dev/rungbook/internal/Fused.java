package dev.rungbook.internal;

/**
 * Fused per-row (channel axis 0) linear quantize, dequantize and error sums for a row-major {@code [rows x cols]}
 * float matrix: the hot path of per-channel int8/intN studies. Internal.
 *
 * <p>For each row {@code r} with values {@code x}, at {@code b} bits (2..16), codes are signed integers:
 * <ul>
 *   <li>symmetric: {@code q_max = 2^(b-1) - 1}, {@code scale = max|x| / q_max}, zero point 0, codes
 *       {@code clamp(rint(x / scale), -q_max, q_max)} (the range is symmetric, so {@code -2^(b-1)} is not used);</li>
 *   <li>asymmetric: {@code q_min = -2^(b-1)}, {@code q_max = 2^(b-1) - 1}; the range {@code [lo, hi] = [min(min x, 0),
 *       max(max x, 0)]} always contains 0 (common practice, so that 0 is exact); {@code scale = (hi - lo) / (q_max -
 *       q_min)}, {@code zp = clamp(rint(q_min - lo / scale), q_min, q_max)}, codes
 *       {@code clamp(rint(x / scale) + zp, q_min, q_max)}.</li>
 * </ul>
 * Dequantized values are {@code (code - zp) * scale}. {@code rint} is round half to even. The scale is computed in
 * double and stored as float; {@code x / scale} and the dequantization are float operations. A row of zeros gets
 * scale 1 and zero point 0 (all codes 0, exact); a non-zero range whose scale would fall below
 * {@link Float#MIN_NORMAL} uses {@code MIN_NORMAL} (never a zero or subnormal divisor, never NaN).
 *
 * <p>Error sums per row: {@code sqErr = sum (x - dequant)^2}, {@code sqSignal = sum x^2}. They are accumulated on
 * values measured in steps ({@code (x - dequant) / scale}, {@code x / scale}, so float squares cannot overflow or
 * underflow whatever the magnitudes), in float over chunks of 64 values (eight interleaved partial sums per chunk,
 * see {@link #scalarErrorSums}) and in double across chunks, then multiplied by {@code scale^2} in double (relative
 * rounding error below about {@code 1e-5}, typically {@code 1e-7}). MSE = {@code sqErr / cols}; SQNR = {@code 10 log10(sqSignal / sqErr)}.
 *
 * <p>The rounding is the magic-number trick {@code (v + 1.5 * 2^23) - 1.5 * 2^23}, exact round-half-even for
 * {@code |v| < 2^22}. With the Vector API module ({@link Lanes}) each row takes two passes: its min/max, then one
 * pass that rounds, clamps, stores the narrowed codes and the dequantized values and adds the sums, eight lanes at a
 * time, with the same float operations in the same order as the plain loops, so the same bits. Without the module
 * the loops are written for Java 17's JIT: the rounding with the clamp and the dequantization are separate simple
 * loops over a row (which stays in L1); the min/max reduction, the float-to-int code store and the sums stay scalar
 * (the sums as eight independent chains). The {@code dequantOut} array doubles as scratch for the float codes.
 */
public final class Fused {
    private static final float MAGIC = 12582912f; // 1.5 * 2^23
    private static final int CHUNK = 64;
    private static final int LANES = 8;

    private Fused() {
    }

    /**
     * Quantizes every row of {@code w} at {@code bits <= 8} into byte codes. See the class comment for the formulas.
     *
     * @param w row-major matrix, at least {@code rows * cols} values, all finite (not modified)
     * @param rows number of rows (channels), at least 1
     * @param cols values per row, at least 1
     * @param bits 2..8
     * @param symmetric symmetric (zero point 0) or asymmetric with the range stretched to contain 0
     * @param scalesOut receives {@code rows} scales
     * @param zeroPointsOut receives {@code rows} zero points (0 when symmetric)
     * @param codesOut receives {@code rows * cols} signed codes
     * @param dequantOut receives {@code rows * cols} dequantized values
     * @param sqErrOut receives {@code rows} sums of squared error, or {@code null}
     * @param sqSignalOut receives {@code rows} sums of squared input, or {@code null}
     * @return the largest {@code |x|} of the matrix
     * @throws IllegalArgumentException for bad sizes or bits, or a NaN/infinite value (naming row, column and index)
     */
    public static float quantizeRows(float[] w, int rows, int cols, int bits, boolean symmetric, float[] scalesOut,
            int[] zeroPointsOut, byte[] codesOut, float[] dequantOut, double[] sqErrOut, double[] sqSignalOut) {
        Checks.inRange(bits, 2, 8, "bits for byte codes");
        checkSizes(w, rows, cols, scalesOut, zeroPointsOut, codesOut.length, dequantOut, sqErrOut, sqSignalOut);
        return rows(w, rows, cols, bits, symmetric, scalesOut, zeroPointsOut, codesOut, null, dequantOut, sqErrOut,
                sqSignalOut, true);
    }

    /**
     * Quantizes every row of {@code w} at {@code bits <= 16} into short codes; otherwise as
     * {@link #quantizeRows(float[], int, int, int, boolean, float[], int[], byte[], float[], double[], double[])}.
     */
    public static float quantizeRows(float[] w, int rows, int cols, int bits, boolean symmetric, float[] scalesOut,
            int[] zeroPointsOut, short[] codesOut, float[] dequantOut, double[] sqErrOut, double[] sqSignalOut) {
        Checks.inRange(bits, 2, 16, "bits for short codes");
        checkSizes(w, rows, cols, scalesOut, zeroPointsOut, codesOut.length, dequantOut, sqErrOut, sqSignalOut);
        return rows(w, rows, cols, bits, symmetric, scalesOut, zeroPointsOut, null, codesOut, dequantOut, sqErrOut,
                sqSignalOut, true);
    }

    /**
     * The rows, into {@code bytes} or {@code shorts} (one is null); each row's pass after its min/max runs on the
     * Vector API when {@code vector} is true and the module is there ({@link Lanes#vectorQuantizeRow}), else as the
     * plain loops. Tests call it with {@code vector} false for the reference. Returns the largest {@code |x|}.
     */
    static float rows(float[] w, int rows, int cols, int bits, boolean symmetric, float[] scales, int[] zps,
            byte[] bytes, short[] shorts, float[] dq, double[] sqErr, double[] sqSignal, boolean vector) {
        if (vector) {
            float amax = Lanes.vectorQuantizeRows(w, rows, cols, bits, symmetric, scales, zps, bytes, shorts, dq,
                    sqErr, sqSignal);
            if (amax >= 0) {
                return amax;
            }
        }
        float amax = 0f;
        float hi = (1 << (bits - 1)) - 1;
        float lo = symmetric ? -hi : -hi - 1;
        boolean wantSums = sqErr != null || sqSignal != null;
        double[] sums = wantSums ? new double[2] : null;
        for (int r = 0; r < rows; r++) {
            int off = r * cols;
            float[] mm = vector ? Lanes.minMax(w, off, off + cols, 0f, 0f)
                    : Lanes.scalarMinMax(w, off, off + cols, 0f, 0f);
            float scale = rowParams(w, off, cols, r, bits, symmetric, mm[0], mm[1], scales, zps);
            amax = Math.max(amax, Math.max(-mm[0], mm[1]));
            float zp = zps[r];
            roundRow(w, off, cols, lo, hi, scale, zp, dq);
            dequantRow(w, off, cols, scale, zp, dq, bytes, shorts, sums);
            if (wantSums) {
                double s2 = (double) scale * scale;
                if (sqErr != null) {
                    sqErr[r] = sums[0] * s2;
                }
                if (sqSignal != null) {
                    sqSignal[r] = sums[1] * s2;
                }
            }
        }
        return amax;
    }

    private static int checkSizes(float[] w, int rows, int cols, float[] scales, int[] zps, int codes,
            float[] dequant, double[] sqErr, double[] sqSignal) {
        Checks.require(rows >= 1 && cols >= 1, "matrix must have at least one row and column, got %d x %d", rows,
                cols);
        long n = (long) rows * cols;
        Checks.require(n <= Integer.MAX_VALUE, "matrix %d x %d has more than 2^31-1 values", rows, cols);
        Checks.require(w.length >= n, "input holds %d values, need %d x %d = %d", w.length, rows, cols, n);
        Checks.require(codes >= n && dequant.length >= n, "code and dequantized arrays need %d values, have %d and %d",
                n, codes, dequant.length);
        Checks.require(scales.length >= rows && zps.length >= rows,
                "scale and zero-point arrays need %d entries, have %d and %d", rows, scales.length, zps.length);
        Checks.require(sqErr == null || sqErr.length >= rows, "error sums need %d entries", rows);
        Checks.require(sqSignal == null || sqSignal.length >= rows, "signal sums need %d entries", rows);
        return (int) n;
    }

    /**
     * The scale and zero point of row {@code r} from its min/max (taken together with 0) into {@code scales[r]} and
     * {@code zps[r]}; returns the scale. A non-finite min or max (NaN or infinity in the row) is reported with the
     * first bad value's row, column and index.
     */
    static float rowParams(float[] w, int off, int cols, int r, int bits, boolean symmetric, float mn, float mx,
            float[] scales, int[] zps) {
        if (!Float.isFinite(mn) || !Float.isFinite(mx)) { // Math.min/max propagate NaN
            for (int i = off; i < off + cols; i++) {
                if (!Float.isFinite(w[i])) {
                    throw new IllegalArgumentException("value " + w[i] + " at row " + r + ", column " + (i - off)
                            + " (index " + i + ")");
                }
            }
        }
        int qmax = (1 << (bits - 1)) - 1;
        int qmin = -(1 << (bits - 1));
        double scale;
        int zp = 0;
        if (symmetric) {
            double m = Math.max(-(double) mn, mx);
            scale = m == 0 ? 1.0 : m / qmax;
        } else {
            double range = (double) mx - mn;
            scale = range == 0 ? 1.0 : range / (qmax - qmin);
        }
        float s = (float) scale;
        if (s < Float.MIN_NORMAL) {
            s = Float.MIN_NORMAL;
        }
        if (!symmetric && mx != mn) {
            zp = (int) Math.max(qmin, Math.min(qmax, Math.rint(qmin - mn / (double) s)));
        }
        scales[r] = s;
        zps[r] = zp;
        return s;
    }

    /** Float codes {@code clamp(rint(x / scale) + zp)} into {@code out}. */
    private static void roundRow(float[] w, int off, int cols, float lo, float hi, float scale, float zp,
            float[] out) {
        for (int i = off, end = off + cols; i < end; i++) {
            float t = ((w[i] / scale + MAGIC) - MAGIC) + zp;
            out[i] = Math.max(lo, Math.min(hi, t));
        }
    }

    /**
     * Stores the codes (into whichever of {@code bytes} and {@code shorts} is non-null), replaces the float codes by
     * dequantized values and, when {@code sums} is non-null, puts the row's error and signal sums in steps of the
     * scale into {@code sums[0]} and {@code sums[1]}.
     */
    private static void dequantRow(float[] w, int off, int cols, float scale, float zp, float[] dq, byte[] bytes,
            short[] shorts, double[] sums) {
        int end = off + cols;
        if (bytes != null) {
            for (int i = off; i < end; i++) {
                bytes[i] = (byte) (int) dq[i];
            }
        } else {
            for (int i = off; i < end; i++) {
                shorts[i] = (short) (int) dq[i];
            }
        }
        for (int i = off; i < end; i++) {
            dq[i] = (dq[i] - zp) * scale;
        }
        if (sums != null) {
            // Sums run on values measured in steps (x / scale), so float squares neither overflow nor underflow.
            float inv = 1f / scale;
            double[] es = scalarErrorSums(w, dq, off, end, inv);
            sums[0] = es[0];
            sums[1] = es[1];
        }
    }

    /**
     * The error and signal sums of {@code count} contiguous segments of {@code m} values from {@code off} (segment
     * {@code k} at {@code off + k * m}, scale {@code scales[s0 + k]}) into {@code sqErr[s0 + k]} and
     * {@code sqSignal[s0 + k]} (either may be null): {@link #scalarErrorSums} of the segment with {@code inv = 1 /
     * scale}, times {@code scale^2} in double. On the Vector API when the module is there, with the same bits.
     */
    static void segmentSums(float[] w, float[] d, int off, int count, int m, float[] scales, int s0, double[] sqErr,
            double[] sqSignal) {
        if (Lanes.vectorSegmentSums(w, d, off, count, m, scales, s0, sqErr, sqSignal)) {
            return;
        }
        scalarSegmentSums(w, d, off, count, m, scales, s0, sqErr, sqSignal);
    }

    /** {@link #segmentSums} as plain loops (the fallback, and the reference for tests). */
    static void scalarSegmentSums(float[] w, float[] d, int off, int count, int m, float[] scales, int s0,
            double[] sqErr, double[] sqSignal) {
        for (int k = 0; k < count; k++) {
            float sc = scales[s0 + k];
            int from = off + k * m;
            double[] e = scalarErrorSums(w, d, from, from + m, 1f / sc);
            double s2 = (double) sc * sc;
            if (sqErr != null) {
                sqErr[s0 + k] = e[0] * s2;
            }
            if (sqSignal != null) {
                sqSignal[s0 + k] = e[1] * s2;
            }
        }
    }

    /**
     * {@code sum ((x - d) * inv)^2} and {@code sum (x * inv)^2} over {@code [from, to)}, in the order the class
     * comment describes: per chunk of {@link #CHUNK} values, {@link #LANES} float partial sums (value {@code i} of
     * the chunk into sum {@code i mod LANES}), added pairwise ({@code ((s0 + s1) + (s2 + s3)) + ((s4 + s5) + (s6 +
     * s7))}), chunk totals added in double. Eight independent sums keep the additions off one dependency chain.
     */
    static double[] scalarErrorSums(float[] w, float[] d, int from, int to, float inv) {
        double e = 0;
        double s = 0;
        for (int c = from; c < to; c += CHUNK) {
            int stop = Math.min(to, c + CHUNK);
            float e0 = 0, e1 = 0, e2 = 0, e3 = 0, e4 = 0, e5 = 0, e6 = 0, e7 = 0;
            float s0 = 0, s1 = 0, s2 = 0, s3 = 0, s4 = 0, s5 = 0, s6 = 0, s7 = 0;
            int i = c;
            for (; i + LANES <= stop; i += LANES) {
                float x0 = w[i], x1 = w[i + 1], x2 = w[i + 2], x3 = w[i + 3];
                float x4 = w[i + 4], x5 = w[i + 5], x6 = w[i + 6], x7 = w[i + 7];
                float d0 = (x0 - d[i]) * inv, d1 = (x1 - d[i + 1]) * inv, d2 = (x2 - d[i + 2]) * inv;
                float d3 = (x3 - d[i + 3]) * inv, d4 = (x4 - d[i + 4]) * inv, d5 = (x5 - d[i + 5]) * inv;
                float d6 = (x6 - d[i + 6]) * inv, d7 = (x7 - d[i + 7]) * inv;
                e0 += d0 * d0; e1 += d1 * d1; e2 += d2 * d2; e3 += d3 * d3;
                e4 += d4 * d4; e5 += d5 * d5; e6 += d6 * d6; e7 += d7 * d7;
                float u0 = x0 * inv, u1 = x1 * inv, u2 = x2 * inv, u3 = x3 * inv;
                float u4 = x4 * inv, u5 = x5 * inv, u6 = x6 * inv, u7 = x7 * inv;
                s0 += u0 * u0; s1 += u1 * u1; s2 += u2 * u2; s3 += u3 * u3;
                s4 += u4 * u4; s5 += u5 * u5; s6 += u6 * u6; s7 += u7 * u7;
            }
            if (i < stop) {
                float[] pe = {e0, e1, e2, e3, e4, e5, e6, e7};
                float[] ps = {s0, s1, s2, s3, s4, s5, s6, s7};
                for (int j = 0; i < stop; i++, j++) {
                    float dd = (w[i] - d[i]) * inv;
                    float u = w[i] * inv;
                    pe[j] += dd * dd;
                    ps[j] += u * u;
                }
                e += pairwise(pe);
                s += pairwise(ps);
            } else {
                e += ((e0 + e1) + (e2 + e3)) + ((e4 + e5) + (e6 + e7));
                s += ((s0 + s1) + (s2 + s3)) + ((s4 + s5) + (s6 + s7));
            }
        }
        return new double[] {e, s};
    }

    private static float pairwise(float[] p) {
        return ((p[0] + p[1]) + (p[2] + p[3])) + ((p[4] + p[5]) + (p[6] + p[7]));
    }
}
