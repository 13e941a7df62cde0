package dev.rungbook.io;

import java.io.IOException;
import java.nio.ByteBuffer;
import java.nio.channels.FileChannel;
import java.nio.file.Path;
import java.nio.file.StandardOpenOption;

/** Reads a NumPy {@code .npy} file: one array, named after the file's stem, its data memory-mapped on first use. */
final class NpyReader {
    private NpyReader() {
    }

    /** The file name without its last extension: {@code weights.npy} gives {@code weights}. */
    static String stem(Path file) {
        String n = file.getFileName().toString();
        int dot = n.lastIndexOf('.');
        return dot > 0 ? n.substring(0, dot) : n;
    }

    static Contents read(Path file) throws IOException {
        FileChannel ch = FileChannel.open(file, StandardOpenOption.READ);
        Contents c = new Contents("npy");
        c.resources.add(ch);
        c.files.add(file);
        try {
            String name = stem(file);
            long size = ch.size();
            NpyHeader h = NpyHeader.read(file, null, (off, len) -> {
                long n = Math.max(0, Math.min(len, size - off));
                ByteBuffer b = ByteBuffer.allocate((int) n);
                SafetensorsReader.readFully(ch, b, off);
                return b.array();
            }, size);
            long count = checkedCount(file, name, h);
            long bytes = count * h.dtype.byteSize();
            long have = size - h.dataOffset;
            if (have < bytes) {
                throw new CheckpointFormatException(file, name, "truncated: shape " + Layout.shapeText(h.shape)
                        + " of " + h.dtype + " needs " + bytes + " bytes of data, the file has " + have
                        + " after its header");
            }
            if (have > bytes) {
                throw new CheckpointFormatException(file, name, (have - bytes) + " unexpected bytes after the "
                        + bytes + " bytes of data that shape " + Layout.shapeText(h.shape) + " of " + h.dtype
                        + " needs");
            }
            c.add(new Entry(file, name, h.dtype, h.shape, count) {
                @Override
                float[] read(int[] intShape) throws IOException {
                    float[] dst = new float[(int) count];
                    Decode.fromChannel(ch, h.dataOffset, dtype, h.order, dst);
                    return h.fortran ? Layout.fortranToC(dst, intShape) : dst;
                }
            });
            return c;
        } catch (RuntimeException | IOException e) {
            c.closeAll();
            throw e;
        }
    }

    /** The element count of the header's shape, refusing overflow of the count or of the byte size. */
    static long checkedCount(Path file, String name, NpyHeader h) {
        long count = Layout.elementCount(h.shape);
        if (count < 0 || Layout.byteCount(count, h.dtype.byteSize()) < 0) {
            throw new CheckpointFormatException(file, name, "shape " + Layout.shapeText(h.shape)
                    + " overflows: its " + (count < 0 ? "element count" : "byte size") + " exceeds 2^63-1");
        }
        return count;
    }
}
