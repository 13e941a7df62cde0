package dev.rungbook.nn;

import java.util.Objects;

/**
 * Binary ({@code +-1}) and ternary ({@code -1, 0, +1}) vectors packed 64 to a {@code long}, with dot products by
 * bit logic and population counts, as binary-network kernels compute them (XNOR-Net, Rastegari et al. 2016).
 *
 * <p>Binary: bit 1 means +1, bit 0 means -1, and {@code a . b = n - 2 popcount(a XOR b)} (which equals
 * {@code 2 popcount(XNOR(a, b)) - n}). Ternary: a mask of non-zero entries and a sign mask (1 = negative); only
 * positions non-zero in both vectors contribute, so zeros are skipped:
 * {@code a . b = popcount(both & ~(sa ^ sb)) - popcount(both & (sa ^ sb))}. Both are exact integers.
 */
public final class BitPacked {
    private final int length;
    private final long[] nonZero;
    private final long[] sign;
    private final boolean ternary;

    private BitPacked(int length, long[] nonZero, long[] sign, boolean ternary) {
        this.length = length;
        this.nonZero = nonZero;
        this.sign = sign;
        this.ternary = ternary;
    }

    /** Packs the signs of {@code v}: {@code v[i] >= 0} becomes +1, negative becomes -1. */
    public static BitPacked binary(float[] v) {
        long[] sign = new long[(v.length + 63) >>> 6];
        for (int i = 0; i < v.length; i++) {
            if (!(v[i] >= 0)) {
                if (Float.isNaN(v[i])) {
                    throw new IllegalArgumentException("cannot pack NaN at index " + i);
                }
                sign[i >>> 6] |= 1L << i;
            }
        }
        return new BitPacked(v.length, null, sign, false);
    }

    /** Packs a ternary vector; every value must be -1, 0 or +1. */
    public static BitPacked ternary(float[] v) {
        long[] nz = new long[(v.length + 63) >>> 6];
        long[] sign = new long[nz.length];
        for (int i = 0; i < v.length; i++) {
            if (v[i] == 0) {
                continue;
            }
            if (v[i] != 1 && v[i] != -1) {
                throw new IllegalArgumentException("ternary value at index " + i + " must be -1, 0 or 1, got " + v[i]);
            }
            nz[i >>> 6] |= 1L << i;
            if (v[i] < 0) {
                sign[i >>> 6] |= 1L << i;
            }
        }
        return new BitPacked(v.length, nz, sign, true);
    }

    /** The number of entries. */
    public int length() {
        return length;
    }

    /** True for a ternary vector. */
    public boolean isTernary() {
        return ternary;
    }

    /** Packed storage in bytes (one or two bit planes). */
    public long bytes() {
        return (long) sign.length * 8 * (ternary ? 2 : 1);
    }

    /**
     * The exact dot product with {@code other}, which must have the same length and kind.
     *
     * @throws IllegalArgumentException if lengths or kinds differ
     */
    public int dot(BitPacked other) {
        Objects.requireNonNull(other, "other");
        if (other.length != length || other.ternary != ternary) {
            throw new IllegalArgumentException("cannot take the dot product of a " + describe() + " and a "
                    + other.describe());
        }
        if (!ternary) {
            int differ = 0;
            int full = length >>> 6;
            for (int w = 0; w < full; w++) {
                differ += Long.bitCount(sign[w] ^ other.sign[w]);
            }
            int rest = length & 63;
            if (rest > 0) {
                long mask = (1L << rest) - 1;
                differ += Long.bitCount((sign[full] ^ other.sign[full]) & mask);
            }
            return length - 2 * differ;
        }
        int dot = 0;
        for (int w = 0; w < nonZero.length; w++) {
            long both = nonZero[w] & other.nonZero[w];
            if (both == 0) {
                continue;
            }
            long opposite = sign[w] ^ other.sign[w];
            dot += Long.bitCount(both & ~opposite) - Long.bitCount(both & opposite);
        }
        return dot;
    }

    private String describe() {
        return (ternary ? "ternary" : "binary") + " vector of length " + length;
    }
}
