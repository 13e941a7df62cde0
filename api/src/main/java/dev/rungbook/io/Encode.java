package dev.rungbook.io;

import dev.rungbook.internal.TensorAccess;
import dev.rungbook.tensor.DType;
import dev.rungbook.tensor.FloatFormat;
import dev.rungbook.tensor.Tensor;
import java.io.IOException;
import java.nio.ByteBuffer;
import java.nio.ByteOrder;
import java.nio.file.Path;

/**
 * Converts a tensor's float32 values to the bytes of its target dtype (its dtype tag), little-endian, in pieces.
 *
 * <p>Floats: F32 and F64 are exact; F16, BF16 and the 8-bit floats round to nearest, ties to even
 * ({@link FloatFormat#round}). A finite value that would overflow to infinity or NaN, and an infinity in a format
 * without one (E4M3), are refused rather than written as a different number. NaN is written as NaN.
 * Integers and BOOL: every value must be an exact integer in the type's range (BOOL: 0 or 1), else the write fails.
 */
final class Encode {
    private static final int CHUNK = 1 << 16;

    private Encode() {
    }

    /** Receives encoded pieces; the buffer is only valid during the call. */
    interface Sink {
        void accept(ByteBuffer piece) throws IOException;
    }

    static void encode(Path file, String name, Tensor t, Sink sink) throws IOException {
        float[] v = TensorAccess.data(t);
        DType type = t.dtype();
        int size = type.byteSize();
        ByteBuffer buf = ByteBuffer.allocate(Math.min(v.length, CHUNK) * size + 8).order(ByteOrder.LITTLE_ENDIAN);
        for (int from = 0; from < v.length; from += CHUNK) {
            int to = Math.min(v.length, from + CHUNK);
            buf.clear();
            switch (type) {
                case F32:
                    buf.asFloatBuffer().put(v, from, to - from);
                    buf.position((to - from) * 4);
                    break;
                case F64:
                    for (int i = from; i < to; i++) {
                        buf.putDouble(v[i]);
                    }
                    break;
                case BF16:
                    for (int i = from; i < to; i++) {
                        buf.putShort((short) narrow(file, name, t, FloatFormat.BF16, v, i));
                    }
                    break;
                case F16:
                    for (int i = from; i < to; i++) {
                        buf.putShort((short) narrow(file, name, t, FloatFormat.F16, v, i));
                    }
                    break;
                case F8_E4M3:
                    for (int i = from; i < to; i++) {
                        buf.put((byte) narrow(file, name, t, FloatFormat.E4M3, v, i));
                    }
                    break;
                case F8_E5M2:
                    for (int i = from; i < to; i++) {
                        buf.put((byte) narrow(file, name, t, FloatFormat.E5M2, v, i));
                    }
                    break;
                case I64:
                    for (int i = from; i < to; i++) {
                        buf.putLong(integer(file, name, t, v, i, -0x1p63, 0x1p63));
                    }
                    break;
                case I32:
                    for (int i = from; i < to; i++) {
                        buf.putInt((int) integer(file, name, t, v, i, Integer.MIN_VALUE, 0x1p31));
                    }
                    break;
                case I16:
                    for (int i = from; i < to; i++) {
                        buf.putShort((short) integer(file, name, t, v, i, Short.MIN_VALUE, Short.MAX_VALUE + 1.0));
                    }
                    break;
                case U16:
                    for (int i = from; i < to; i++) {
                        buf.putShort((short) integer(file, name, t, v, i, 0, 65536));
                    }
                    break;
                case I8:
                    for (int i = from; i < to; i++) {
                        buf.put((byte) integer(file, name, t, v, i, Byte.MIN_VALUE, Byte.MAX_VALUE + 1.0));
                    }
                    break;
                case U8:
                    for (int i = from; i < to; i++) {
                        buf.put((byte) integer(file, name, t, v, i, 0, 256));
                    }
                    break;
                case BOOL:
                    for (int i = from; i < to; i++) {
                        buf.put((byte) integer(file, name, t, v, i, 0, 2));
                    }
                    break;
                default:
                    throw new AssertionError(type);
            }
            buf.flip();
            sink.accept(buf);
        }
    }

    private static int narrow(Path file, String name, Tensor t, FloatFormat f, float[] v, int i) {
        float x = v[i];
        if (Float.isInfinite(x) && !f.hasInfinity()) {
            throw refusal(file, name, t, i, x, "cannot be written as " + t.dtype() + ", which has no infinity");
        }
        float r = f.round(x);
        if (!Float.isNaN(x) && (Float.isNaN(r) || Float.isInfinite(r) && !Float.isInfinite(x))) {
            throw refusal(file, name, t, i, x, "overflows " + t.dtype() + " (largest finite value " + f.max() + ")");
        }
        return f.encode(x);
    }

    /** {@code v[i]} as an integer in [lo, hiExclusive). */
    private static long integer(Path file, String name, Tensor t, float[] v, int i, double lo, double hiExclusive) {
        float x = v[i];
        if (x != Math.rint(x) || Float.isInfinite(x)) {
            throw refusal(file, name, t, i, x, "is not an integer, so it cannot be written as " + t.dtype());
        }
        if (x < lo || x >= hiExclusive) {
            throw refusal(file, name, t, i, x, "is outside the range of " + t.dtype());
        }
        return (long) x;
    }

    private static IllegalArgumentException refusal(Path file, String name, Tensor t, int i, float x, String why) {
        return new IllegalArgumentException(file + ": tensor '" + name + "': value " + x + " at flat index " + i + " "
                + why + "; round or clamp it first, or tag the tensor with another dtype (withDType)");
    }
}
