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
     * {@link #RADIX_THRESHOLD} go to {@link Arrays#sort(float[])}; longer ones are radix-sorted with two scratch int
     * arrays of the same length.
     *
     * @param a the values (modified)
     */
    public static void sort(float[] a) {
        int n = a.length;
        if (n < RADIX_THRESHOLD) {
            Arrays.sort(a);
            return;
        }
        int[] keys = new int[n];
        int[] tmp = new int[n];
        int[] c0 = new int[BUCKETS];
        int[] c1 = new int[BUCKETS];
        int[] c2 = new int[BUCKETS];
        for (int i = 0; i < n; i++) {
            int k = key(Float.floatToRawIntBits(a[i]));
            keys[i] = k;
            c0[k & MASK]++;
            c1[(k >>> DIGIT_BITS) & MASK]++;
            c2[k >>> (2 * DIGIT_BITS)]++;
        }
        int[] src = keys;
        int[] dst = tmp;
        int[][] counts = {c0, c1, c2};
        for (int pass = 0; pass < 3; pass++) {
            int[] c = counts[pass];
            int shift = pass * DIGIT_BITS;
            if (c[(src[0] >>> shift) & MASK] == n) {
                continue; // every key has the same digit here
            }
            int sum = 0;
            for (int b = 0; b < BUCKETS; b++) {
                int t = c[b];
                c[b] = sum;
                sum += t;
            }
            for (int i = 0; i < n; i++) {
                int k = src[i];
                dst[c[(k >>> shift) & MASK]++] = k;
            }
            int[] s = src;
            src = dst;
            dst = s;
        }
        for (int i = 0; i < n; i++) {
            a[i] = Float.intBitsToFloat(unkey(src[i]));
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
