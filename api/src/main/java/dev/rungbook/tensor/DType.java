package dev.rungbook.tensor;

import java.util.Locale;
import java.util.Optional;

/**
 * The element type a tensor had where it came from (a checkpoint file), or is to be written as.
 *
 * <p>Rungbook computes in float32; {@code DType} records the origin so that statistics, size accounting and writers
 * can speak of it. Names follow the safetensors header spelling ({@link #safetensorsName()}).
 */
public enum DType {
    /** IEEE binary64. */
    F64(8, true, "F64", "f8"),
    /** IEEE binary32. */
    F32(4, true, "F32", "f4"),
    /** IEEE binary16. */
    F16(2, true, "F16", "f2"),
    /** bfloat16: the upper half of a binary32. */
    BF16(2, true, "BF16", null),
    /** OCP 8-bit float E4M3 (no infinities, one NaN pattern per sign). */
    F8_E4M3(1, true, "F8_E4M3", null),
    /** OCP 8-bit float E5M2 (IEEE-like, with infinities). */
    F8_E5M2(1, true, "F8_E5M2", null),
    /** Signed 64-bit integer. */
    I64(8, false, "I64", "i8"),
    /** Signed 32-bit integer. */
    I32(4, false, "I32", "i4"),
    /** Signed 16-bit integer. */
    I16(2, false, "I16", "i2"),
    /** Signed 8-bit integer. */
    I8(1, false, "I8", "i1"),
    /** Unsigned 8-bit integer. */
    U8(1, false, "U8", "u1"),
    /** Unsigned 16-bit integer. */
    U16(2, false, "U16", "u2"),
    /** Boolean, one byte per value (0 or 1). */
    BOOL(1, false, "BOOL", "b1");

    private final int byteSize;
    private final boolean floating;
    private final String safetensorsName;
    private final String numpyCode;

    DType(int byteSize, boolean floating, String safetensorsName, String numpyCode) {
        this.byteSize = byteSize;
        this.floating = floating;
        this.safetensorsName = safetensorsName;
        this.numpyCode = numpyCode;
    }

    /** Bytes per element. */
    public int byteSize() {
        return byteSize;
    }

    /** Bits per element. */
    public int bits() {
        return byteSize * 8;
    }

    /** True for the floating-point types. */
    public boolean isFloatingPoint() {
        return floating;
    }

    /** The dtype string used in safetensors headers, e.g. {@code "BF16"}. */
    public String safetensorsName() {
        return safetensorsName;
    }

    /**
     * The NumPy type code without byte order (kind letter plus byte count, e.g. {@code "f4"}), or empty when NumPy
     * has no standard type for it (bfloat16 and the 8-bit floats).
     */
    public Optional<String> numpyCode() {
        return Optional.ofNullable(numpyCode);
    }

    /** Looks a dtype up by its safetensors name, case-insensitively; empty when unknown. */
    public static Optional<DType> fromSafetensorsName(String name) {
        String upper = name.toUpperCase(Locale.ROOT);
        for (DType t : values()) {
            if (t.safetensorsName.equals(upper)) {
                return Optional.of(t);
            }
        }
        return Optional.empty();
    }

    /** Looks a dtype up by NumPy kind letter and byte count ({@code 'f', 4} is F32); empty when unsupported. */
    public static Optional<DType> fromNumpyCode(String code) {
        for (DType t : values()) {
            if (code.equals(t.numpyCode)) {
                return Optional.of(t);
            }
        }
        return Optional.empty();
    }
}
