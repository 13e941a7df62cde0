package dev.rungbook.internal;

import java.util.Arrays;

/**
 * Sorting of float arrays by an LSD radix sort on the IEEE 754 bit patterns, and compression of a sorted array to its
 * distinct values with their counts. Internal.
 *
 * <p>The order is {@link Arrays#sort(float[])}'s: ascending, {@code -0.0f} before {@code +0.0f}. The radix sort maps
 * each bit pattern to an unsigned key that orders like the float (negative values: all bits flipped; others: sign bit
 * flipped) and sorts the keys in three passes of 11 bits, skipping a pass when every key shares that digit. NaN is not
 * expected (callers refuse it); if present it sorts by its bit pattern (positive NaNs last, negative NaNs first), which
 * differs from {@link Arrays#sort(float[])}.
 */
public final class FloatSort {
    /** Below this length {@link #sort(float[])} uses {@link Arrays#sort(float[])}. */
    public static final int RADIX_THRESHOLD = 4096;

    private static final int DIGIT_BITS = 11;
    private static final int BUCKETS = 1 << DIGIT_BITS;
    private static final int MASK = BUCKETS - 1;

    private FloatSort() {
    }

    /**
     * Sorts {@code a} in place, ascending, with {@code -0.0f} before {@code +0.0f}. Arrays shorter than
     * {@link #RADIX_THRESHOLD} go to {@link Arrays#sort(float[])}; longer ones are radix-sorted with up to two scratch
     * int arrays of the same length.
     *
     * @param a the values (modified)
     */
    public static void sort(float[] a) {
        if (a.length < RADIX_THRESHOLD) {
            Arrays.sort(a);
            return;
        }
        sortInto(a, a);
    }

    /**
     * A sorted copy of {@code a} (same order as {@link #sort(float[])}), without a separate copying pass.
     *
     * @param a the values (not modified)
     * @return a new ascending array
     */
    public static float[] sortedCopy(float[] a) {
        if (a.length < RADIX_THRESHOLD) {
            float[] c = a.clone();
            Arrays.sort(c);
            return c;
        }
        float[] out = new float[a.length];
        sortInto(a, out);
        return out;
    }

    /**
     * Sorts {@code a[from, to)} in place, in the order of {@link #sort(float[])}.
     *
     * @param a the array (modified in that range only)
     * @param from first index, inclusive
     * @param to last index, exclusive
     */
    public static void sortRange(float[] a, int from, int to) {
        if (to - from < RADIX_THRESHOLD) {
            Arrays.sort(a, from, to);
            return;
        }
        float[] slice = Arrays.copyOfRange(a, from, to);
        sortInto(slice, slice);
        System.arraycopy(slice, 0, a, from, slice.length);
    }

    /** Radix-sorts {@code in} into {@code out} (which may be {@code in}); the first pass reads all of {@code in}. */
    private static void sortInto(float[] a, float[] out) {
        int n = a.length;
        int[] c0 = new int[BUCKETS];
        int[] c1 = new int[BUCKETS];
        int[] c2 = new int[BUCKETS];
        histogram(a, c0, c1, c2);
        int firstKey = key(Float.floatToRawIntBits(a[0]));
        int[][] counts = {c0, c1, c2};
        int[] shifts = new int[3];
        int passes = 0;
        for (int pass = 0; pass < 3; pass++) {
            int shift = pass * DIGIT_BITS;
            int[] c = counts[pass];
            if (c[(firstKey >>> shift) & MASK] == n) {
                continue; // every key has the same digit here
            }
            int sum = 0;
            for (int b = 0; b < BUCKETS; b++) {
                int t = c[b];
                c[b] = sum;
                sum += t;
            }
            counts[passes] = c;
            shifts[passes++] = shift;
        }
        if (passes == 0) {
            if (out != a) {
                System.arraycopy(a, 0, out, 0, n);
            }
            return; // all bit patterns are equal
        }
        // First pass reads the floats, middle passes go between two key buffers, the last writes floats back.
        int[] src = new int[n];
        int[] c = counts[0];
        int shift = shifts[0];
        scatterFromFloats(a, src, c, shift);
        int[] dst = passes > 2 ? new int[n] : null;
        for (int pass = 1; pass < passes - 1; pass++) {
            c = counts[pass];
            shift = shifts[pass];
            scatter(src, dst, c, shift);
            int[] s = src;
            src = dst;
            dst = s;
        }
        if (passes == 1) {
            for (int i = 0; i < n; i++) {
                out[i] = Float.intBitsToFloat(unkey(src[i]));
            }
            return;
        }
        c = counts[passes - 1];
        shift = shifts[passes - 1];
        scatterToFloats(src, out, c, shift);
    }

    // Each pass is its own small method so that the JIT compiles it as a whole method rather than on-stack.

    private static void histogram(float[] a, int[] c0, int[] c1, int[] c2) {
        for (int i = 0; i < a.length; i++) {
            int k = key(Float.floatToRawIntBits(a[i]));
            c0[k & MASK]++;
            c1[(k >>> DIGIT_BITS) & MASK]++;
            c2[k >>> (2 * DIGIT_BITS)]++;
        }
    }

    private static void scatterFromFloats(float[] a, int[] dst, int[] c, int shift) {
        for (int i = 0; i < a.length; i++) {
            int k = key(Float.floatToRawIntBits(a[i]));
            dst[c[(k >>> shift) & MASK]++] = k;
        }
    }

    private static void scatter(int[] src, int[] dst, int[] c, int shift) {
        for (int i = 0; i < src.length; i++) {
            int k = src[i];
            dst[c[(k >>> shift) & MASK]++] = k;
        }
    }

    private static void scatterToFloats(int[] src, float[] a, int[] c, int shift) {
        for (int i = 0; i < src.length; i++) {
            int k = src[i];
            a[c[(k >>> shift) & MASK]++] = Float.intBitsToFloat(unkey(k));
        }
    }

    /** Unsigned-order key of a float bit pattern; {@code unkey(key(b)) == b}. */
    static int key(int bits) {
        return bits ^ ((bits >> 31) | Integer.MIN_VALUE);
    }

    static int unkey(int key) {
        // key's top bit is set for non-negative floats (flip sign only) and clear for negatives (flip all).
        return key ^ ((~key >> 31) | Integer.MIN_VALUE);
    }

    /**
     * Compresses an ascending array to its distinct values and how often each occurs. {@code -0.0f} and
     * {@code +0.0f} are equal numbers and count as one value, reported as {@code 0.0}.
     *
     * @param sorted ascending values without NaN (not modified)
     * @return {@code {values, counts}}: values ascending and distinct, counts (as doubles) summing to
     *     {@code sorted.length}; both empty for an empty input
     * @throws IllegalArgumentException if {@code sorted} is not ascending or holds NaN, naming the first bad index
     */
    public static double[][] distinctWithCounts(float[] sorted) {
        int n = sorted.length;
        int distinct = 0;
        for (int i = 0; i < n; i++) {
            float v = sorted[i];
            if (v != v) {
                throw new IllegalArgumentException("value at index " + i + " is NaN");
            }
            if (i == 0 || v != sorted[i - 1]) {
                if (i > 0 && v < sorted[i - 1]) {
                    throw new IllegalArgumentException("values are not ascending at index " + i + ": "
                            + sorted[i - 1] + " then " + v);
                }
                distinct++;
            }
        }
        double[] values = new double[distinct];
        double[] counts = new double[distinct];
        int j = -1;
        for (int i = 0; i < n; i++) {
            float v = sorted[i];
            if (i == 0 || v != sorted[i - 1]) {
                j++;
                values[j] = v == 0f ? 0.0 : v;
            }
            counts[j]++;
        }
        return new double[][] {values, counts};
    }
}
