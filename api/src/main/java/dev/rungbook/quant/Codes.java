package dev.rungbook.quant;

import java.util.Arrays;

/**
 * The integer codes of a {@link Quantized} tensor, one per element in row-major order, held compactly (one byte per
 * code up to 8 bits, two bytes up to 16). What a code means depends on the grid: the signed or unsigned integer of a
 * linear grid; the bit pattern of a float format; the level index of a codebook, NF4 or log grid; -1/+1 for binary
 * and -1/0/+1 for ternary grids. Immutable.
 */
public final class Codes {
    private final byte[] bytes;
    private final short[] shorts;
    private final int bits;
    private final boolean signed;

    private Codes(byte[] bytes, short[] shorts, int bits, boolean signed) {
        this.bytes = bytes;
        this.shorts = shorts;
        this.bits = bits;
        this.signed = signed;
    }

    /** Empty codes of the given width, filled by the quantizer through {@link #set} before publication. */
    static Codes allocate(int n, int bits, boolean signed) {
        if (bits <= 8) {
            return new Codes(new byte[n], null, bits, signed);
        }
        return new Codes(null, new short[n], bits, signed);
    }

    void set(int i, int code) {
        if (bytes != null) {
            bytes[i] = (byte) code;
        } else {
            shorts[i] = (short) code;
        }
    }

    /** The number of codes. */
    public int size() {
        return bytes != null ? bytes.length : shorts.length;
    }

    /** The width of one code in bits as stored when bit-packed (the storage here is byte or short). */
    public int bits() {
        return bits;
    }

    /** True if codes are signed integers (linear signed grids, binary, ternary). */
    public boolean signed() {
        return signed;
    }

    /** Code {@code i}. */
    public int get(int i) {
        if (bytes != null) {
            return signed ? bytes[i] : bytes[i] & 0xFF;
        }
        return signed ? shorts[i] : shorts[i] & 0xFFFF;
    }

    /** All codes as a new int array. */
    public int[] toIntArray() {
        int n = size();
        int[] out = new int[n];
        for (int i = 0; i < n; i++) {
            out[i] = get(i);
        }
        return out;
    }

    /** The number of bytes the codes take when bit-packed: {@code ceil(size * bits / 8)}. */
    public long packedBytes() {
        return (size() * (long) bits + 7) / 8;
    }

    @Override
    public boolean equals(Object o) {
        if (!(o instanceof Codes)) {
            return false;
        }
        Codes c = (Codes) o;
        return bits == c.bits && signed == c.signed && Arrays.equals(bytes, c.bytes) && Arrays.equals(shorts, c.shorts);
    }

    @Override
    public int hashCode() {
        return Arrays.hashCode(bytes) * 31 + Arrays.hashCode(shorts) + bits;
    }

    @Override
    public String toString() {
        return size() + " " + (signed ? "signed " : "unsigned ") + bits + "-bit codes";
    }
}
