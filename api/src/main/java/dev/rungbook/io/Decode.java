package dev.rungbook.io;

import dev.rungbook.tensor.DType;
import dev.rungbook.tensor.FloatFormat;
import java.io.EOFException;
import java.io.IOException;
import java.io.InputStream;
import java.nio.ByteBuffer;
import java.nio.ByteOrder;
import java.nio.MappedByteBuffer;
import java.nio.ShortBuffer;
import java.nio.channels.FileChannel;

/**
 * Converts stored element bytes to float32. Integers and narrow floats convert exactly; F64 rounds to nearest even
 * (Java's double-to-float cast); I64 and I32 values beyond 2^24 in magnitude round to the nearest float32 (Java's
 * long/int-to-float conversion, round to nearest even); BOOL gives 0 for a zero byte and 1 otherwise.
 */
final class Decode {
    /** Largest mapping made at once: 1 GiB, a multiple of every element size (a mapping is limited to 2 GiB). */
    static final long MAP_CHUNK = 1L << 30;
    private static final int STREAM_CHUNK = 1 << 20;
    private static final int SCRATCH = 8192;

    private Decode() {
    }

    /** float32 value of every F16 code, built once from {@link FloatFormat#decode}. */
    private static final class F16Table {
        static final float[] VALUES = table(FloatFormat.F16, 1 << 16);
    }

    private static final class E4M3Table {
        static final float[] VALUES = table(FloatFormat.E4M3, 256);
    }

    private static final class E5M2Table {
        static final float[] VALUES = table(FloatFormat.E5M2, 256);
    }

    private static float[] table(FloatFormat f, int n) {
        float[] t = new float[n];
        for (int i = 0; i < n; i++) {
            t[i] = f.decode(i);
        }
        return t;
    }

    /**
     * Decodes {@code n} elements of {@code type} from {@code src} (already set to the file's byte order, positioned at
     * the first element) into {@code dst[off..off+n)}, advancing {@code src}.
     */
    static void decode(ByteBuffer src, DType type, float[] dst, int off, int n) {
        int parts = Math.min(Runtime.getRuntime().availableProcessors(), n / PARALLEL_MIN_ELEMENTS);
        if (parts < 2) {
            decodeSerial(src, type, dst, off, n);
            return;
        }
        // Large tensors convert in parallel slices; each slice reads its own view of the buffer.
        int start = src.position();
        int size = type.byteSize();
        ByteOrder order = src.order();
        java.util.stream.IntStream.range(0, parts).parallel().forEach(part -> {
            int from = (int) ((long) n * part / parts);
            int to = (int) ((long) n * (part + 1) / parts);
            ByteBuffer slice = src.duplicate().order(order);
            slice.position(start + from * size);
            decodeSerial(slice, type, dst, off + from, to - from);
        });
        src.position(start + n * size);
    }

    /** Slices below this many elements are not worth a second thread. */
    static final int PARALLEL_MIN_ELEMENTS = 1 << 22;

    private static void decodeSerial(ByteBuffer src, DType type, float[] dst, int off, int n) {
        switch (type) {
            case F32:
                src.asFloatBuffer().get(dst, off, n);
                break;
            case F64: {
                var d = src.asDoubleBuffer();
                for (int i = 0; i < n; i++) {
                    dst[off + i] = (float) d.get(i);
                }
                break;
            }
            case BF16: {
                ShortBuffer s = src.asShortBuffer();
                short[] tmp = new short[Math.min(n, SCRATCH)];
                for (int done = 0; done < n; ) {
                    int k = Math.min(tmp.length, n - done);
                    s.get(tmp, 0, k);
                    int base = off + done;
                    for (int i = 0; i < k; i++) {
                        dst[base + i] = Float.intBitsToFloat(tmp[i] << 16);
                    }
                    done += k;
                }
                break;
            }
            case F16: {
                float[] table = F16Table.VALUES;
                ShortBuffer s = src.asShortBuffer();
                short[] tmp = new short[Math.min(n, SCRATCH)];
                for (int done = 0; done < n; ) {
                    int k = Math.min(tmp.length, n - done);
                    s.get(tmp, 0, k);
                    int base = off + done;
                    for (int i = 0; i < k; i++) {
                        dst[base + i] = table[tmp[i] & 0xFFFF];
                    }
                    done += k;
                }
                break;
            }
            case F8_E4M3:
                bytes(src, E4M3Table.VALUES, dst, off, n);
                break;
            case F8_E5M2:
                bytes(src, E5M2Table.VALUES, dst, off, n);
                break;
            case I64: {
                var l = src.asLongBuffer();
                for (int i = 0; i < n; i++) {
                    dst[off + i] = (float) l.get(i);
                }
                break;
            }
            case I32: {
                var l = src.asIntBuffer();
                for (int i = 0; i < n; i++) {
                    dst[off + i] = (float) l.get(i);
                }
                break;
            }
            case I16: {
                var l = src.asShortBuffer();
                for (int i = 0; i < n; i++) {
                    dst[off + i] = l.get(i);
                }
                break;
            }
            case U16: {
                var l = src.asShortBuffer();
                for (int i = 0; i < n; i++) {
                    dst[off + i] = l.get(i) & 0xFFFF;
                }
                break;
            }
            case I8:
                for (int i = 0; i < n; i++) {
                    dst[off + i] = src.get(src.position() + i);
                }
                break;
            case U8:
                for (int i = 0; i < n; i++) {
                    dst[off + i] = src.get(src.position() + i) & 0xFF;
                }
                break;
            case BOOL:
                for (int i = 0; i < n; i++) {
                    dst[off + i] = src.get(src.position() + i) != 0 ? 1f : 0f;
                }
                break;
            default:
                throw new AssertionError(type);
        }
        src.position(src.position() + n * type.byteSize());
    }

    private static void bytes(ByteBuffer src, float[] table, float[] dst, int off, int n) {
        int p = src.position();
        for (int i = 0; i < n; i++) {
            dst[off + i] = table[src.get(p + i) & 0xFF];
        }
    }

    /**
     * Reads {@code dst.length} elements stored at {@code position} in {@code channel}, mapping the region read-only in
     * pieces of at most {@link #MAP_CHUNK} bytes.
     */
    static void fromChannel(FileChannel channel, long position, DType type, ByteOrder order, float[] dst)
            throws IOException {
        fromChannel(channel, position, type, order, dst, MAP_CHUNK);
    }

    /** As above with mappings of at most {@code chunkBytes} (a multiple of 8); tests use small pieces. */
    static void fromChannel(FileChannel channel, long position, DType type, ByteOrder order, float[] dst,
            long chunkBytes) throws IOException {
        int size = type.byteSize();
        long perChunk = chunkBytes / size;
        int done = 0;
        while (done < dst.length) {
            int k = (int) Math.min(perChunk, dst.length - done);
            MappedByteBuffer map = channel.map(FileChannel.MapMode.READ_ONLY, position + (long) done * size,
                    (long) k * size);
            map.order(order);
            decode(map, type, dst, done, k);
            done += k;
        }
    }

    /**
     * Reads exactly {@code dst.length} elements from {@code in}, in pieces of at most 1 MiB.
     *
     * @throws EOFException if the stream ends first; the message says how many bytes were read
     */
    static void fromStream(InputStream in, DType type, ByteOrder order, float[] dst) throws IOException {
        int size = type.byteSize();
        int perChunk = STREAM_CHUNK / size;
        byte[] buf = new byte[(int) Math.min((long) perChunk * size, Math.max(size, (long) dst.length * size))];
        ByteBuffer bb = ByteBuffer.wrap(buf).order(order);
        int done = 0;
        while (done < dst.length) {
            int k = Math.min(perChunk, dst.length - done);
            int want = k * size;
            int got = in.readNBytes(buf, 0, want);
            if (got < want) {
                throw new EOFException("data ends after " + ((long) done * size + got) + " of "
                        + (long) dst.length * size + " bytes");
            }
            bb.clear();
            decode(bb, type, dst, done, k);
            done += k;
        }
    }
}
