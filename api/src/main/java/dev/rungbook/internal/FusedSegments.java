package dev.rungbook.internal;

/**
 * Fused per-group quantize, dequantize and error sums for a tensor cut into {@code count} contiguous segments of
 * {@code m} values (groups along the last axis of a row-major tensor, NF4 blocks): the per-group counterpart of
 * {@link Fused}'s per-row kernel, with caller-owned outputs. Internal.
 *
 * <p>The work goes in runs of whole segments of about {@value #RUN_VALUES} values, so that each run is read from
 * memory once and stays in L1 for the rest: the scales from the largest {@code |x|} of every segment, the codes and
 * dequantized values ({@link SegmentKernels#linear} or {@link SegmentKernels#levels}, which take the next run's
 * largest magnitudes on the side, so the next run is read from memory while this one is quantized), then the error
 * sums of every segment as {@link Fused} takes them (on values measured in steps of the scale, eight float
 * lanes per chunk of 64, chunks added in double, times {@code scale^2}).
 *
 * <p>Codes, scales and dequantized values are those of the public API's default specs, bit for bit:
 * {@code Quantizer.linear(bits).perGroup(lastAxis, m)} (symmetric, codes {@code -2^(b-1) .. 2^(b-1) - 1}, scale
 * {@code max|x| / (2^(b-1) - 1)} fitted by {@link Scales#fit} so that the largest value is a level, 1 for an
 * all-zero group) and {@code Quantizer.nf4().blockSize(m)} (absmax scale, 1 for an all-zero block). Tests check both.
 */
public final class FusedSegments {
    /** Values per run of segments (a run of floats and its dequantized values stay in L1). */
    public static final int RUN_VALUES = 4096;

    private FusedSegments() {
    }

    /**
     * Symmetric linear codes at {@code bits} per segment, one scale per segment.
     *
     * @param w the values, at least {@code count * m}, all finite (not modified)
     * @param count number of segments, at least 1
     * @param m values per segment, at least 1
     * @param bits 2..8
     * @param scalesOut receives {@code count} scales
     * @param codesOut receives {@code count * m} signed codes
     * @param dequantOut receives {@code count * m} dequantized values
     * @param sqErrOut receives {@code count} sums of squared error, or {@code null}
     * @param sqSignalOut receives {@code count} sums of squared input, or {@code null}
     * @throws IllegalArgumentException for bad sizes or bits, or a NaN/infinite value (naming segment and index)
     */
    public static void linear(float[] w, int count, int m, int bits, float[] scalesOut, byte[] codesOut,
            float[] dequantOut, double[] sqErrOut, double[] sqSignalOut) {
        Checks.inRange(bits, 2, 8, "bits for byte codes");
        checkSizes(w, count, m, scalesOut, codesOut, dequantOut, sqErrOut, sqSignalOut);
        int qmax = (1 << (bits - 1)) - 1;
        runs(w, count, m, scalesOut, dequantOut, sqErrOut, sqSignalOut,
                a -> a > 0 ? Scales.fit((double) a / qmax, a, qmax) : 1f,
                (off, len, s0, nextLen, amax) -> {
                    SegmentKernels.linear(w, off, len, m, scalesOut, null, s0, -qmax - 1, qmax, dequantOut, codesOut,
                            null, nextLen, amax);
                    return false;
                });
    }

    /**
     * NF4 codes (0..15, indices into {@link Nf4#levels}) per segment with the absmax scale.
     *
     * @param w the values, at least {@code count * m}, all finite (not modified)
     * @param count number of blocks, at least 1
     * @param m values per block, at least 1
     * @param scalesOut receives {@code count} scales
     * @param codesOut receives {@code count * m} codes
     * @param dequantOut receives {@code count * m} dequantized values
     * @param sqErrOut receives {@code count} sums of squared error, or {@code null}
     * @param sqSignalOut receives {@code count} sums of squared input, or {@code null}
     * @throws IllegalArgumentException for bad sizes, or a NaN/infinite value (naming block and index)
     */
    public static void nf4(float[] w, int count, int m, float[] scalesOut, byte[] codesOut, float[] dequantOut,
            double[] sqErrOut, double[] sqSignalOut) {
        checkSizes(w, count, m, scalesOut, codesOut, dequantOut, sqErrOut, sqSignalOut);
        SegmentKernels.Levels table = Nf4.table();
        float[] scratch = new float[Math.min(m, 4096)];
        runs(w, count, m, scalesOut, dequantOut, sqErrOut, sqSignalOut, a -> a > 0 ? a : 1f,
                (off, len, s0, nextLen, amax) -> {
                    SegmentKernels.levels(w, off, len, m, scalesOut, s0, table, dequantOut, codesOut, scratch,
                            nextLen, amax, sqErrOut, sqSignalOut);
                    return true;
                });
    }

    /** A segment's scale from its largest magnitude (finite, at least 0). */
    private interface ScaleRule {
        float of(float amax);
    }

    /**
     * A run kernel: codes and values of the {@code len} segments from {@code off} (segment {@code s0} first), the
     * largest magnitudes of the next run's first {@code nextLen} segments into {@code amax}.
     */
    private interface RunKernel {
        /** Returns whether it also wrote the run's error sums. */
        boolean code(int off, int len, int s0, int nextLen, float[] amax);
    }

    /** The runs of segments (see the class comment): scales, the run kernel, the error sums. */
    private static void runs(float[] w, int count, int m, float[] scales, float[] deq, double[] sqErr,
            double[] sqSignal, ScaleRule rule, RunKernel kernel) {
        int run = Math.max(1, Math.min(count, RUN_VALUES / m));
        float[] amax = new float[run];
        SegmentKernels.maxAbs(w, 0, run, m, amax);
        for (int s0 = 0; s0 < count; s0 += run) {
            int len = Math.min(run, count - s0);
            for (int k = 0; k < len; k++) {
                scales[s0 + k] = rule.of(finite(w, amax[k], s0 + k, m));
            }
            // the next run's largest magnitudes come on the side, into amax (read above)
            boolean summed = kernel.code(s0 * m, len, s0, Math.max(0, Math.min(run, count - s0 - len)), amax);
            if (!summed && (sqErr != null || sqSignal != null)) {
                Fused.segmentSums(w, deq, s0 * m, len, m, scales, s0, sqErr, sqSignal);
            }
        }
    }

    /** {@code a} if finite, else an error naming segment {@code s}'s first NaN or infinite value. */
    private static float finite(float[] w, float a, int s, int m) {
        if (a <= Float.MAX_VALUE) {
            return a;
        }
        for (int i = s * m; i < (s + 1) * m; i++) {
            if (!Float.isFinite(w[i])) {
                throw new IllegalArgumentException(String.format("value %s at index %d (segment %d, element %d): "
                        + "only finite values can be quantized", w[i], i, s, i - s * m));
            }
        }
        throw new IllegalStateException("segment " + s + " has a non-finite maximum but only finite values");
    }

    private static void checkSizes(float[] w, int count, int m, float[] scales, byte[] codes, float[] dequant,
            double[] sqErr, double[] sqSignal) {
        Checks.require(count >= 1 && m >= 1, "need at least one segment of at least one value, got %d x %d", count,
                m);
        long n = (long) count * m;
        Checks.require(n <= Integer.MAX_VALUE, "%d segments of %d values exceed 2^31-1 values", count, m);
        Checks.require(w.length >= n, "input holds %d values, need %d x %d = %d", w.length, count, m, n);
        Checks.require(codes.length >= n && dequant.length >= n,
                "code and dequantized arrays need %d values, have %d and %d", n, codes.length, dequant.length);
        Checks.require(scales.length >= count, "the scale array needs %d entries, has %d", count, scales.length);
        Checks.require(sqErr == null || sqErr.length >= count, "error sums need %d entries", count);
        Checks.require(sqSignal == null || sqSignal.length >= count, "signal sums need %d entries", count);
    }
}
