package dev.rungbook.io;

import dev.rungbook.tensor.Tensor;
import java.io.BufferedOutputStream;
import java.io.IOException;
import java.io.OutputStream;
import java.nio.channels.Channels;
import java.nio.channels.FileChannel;
import java.nio.file.Path;
import java.time.LocalDateTime;
import java.util.Map;
import java.util.SortedMap;
import java.util.zip.CRC32;
import java.util.zip.ZipEntry;
import java.util.zip.ZipOutputStream;

/**
 * Writes {@code .npz}: one stored (uncompressed) zip member {@code NAME.npy} per tensor, in name order, each a
 * little-endian C-order {@code .npy} array of format version 1.0 (2.0 when the header needs more than 65535 bytes).
 * Members carry a fixed timestamp (1980-01-01) so that equal content gives equal files.
 */
final class NpzWriter {
    private static final LocalDateTime FIXED_TIME = LocalDateTime.of(1980, 1, 1, 0, 0);

    private NpzWriter() {
    }

    static void write(Path target, FileChannel ch, SortedMap<String, Tensor> tensors) throws IOException {
        OutputStream raw = new BufferedOutputStream(Channels.newOutputStream(ch), 1 << 16);
        ZipOutputStream zip = new ZipOutputStream(raw);
        for (Map.Entry<String, Tensor> e : tensors.entrySet()) {
            Tensor t = e.getValue();
            byte[] header = NpyHeader.format(t.dtype(), t.shape());
            // First pass: CRC-32 and size (a stored member needs both before its data); also validates every value.
            CRC32 crc = new CRC32();
            crc.update(header);
            Encode.encode(target, e.getKey(), t, crc::update);
            long size = header.length + (long) t.size() * t.dtype().byteSize();
            ZipEntry ze = new ZipEntry(e.getKey() + ".npy");
            ze.setMethod(ZipEntry.STORED);
            ze.setSize(size);
            ze.setCompressedSize(size);
            ze.setCrc(crc.getValue());
            ze.setTimeLocal(FIXED_TIME);
            zip.putNextEntry(ze);
            zip.write(header);
            byte[] chunk = new byte[1 << 16];
            Encode.encode(target, e.getKey(), t, piece -> {
                while (piece.hasRemaining()) {
                    int k = Math.min(chunk.length, piece.remaining());
                    piece.get(chunk, 0, k);
                    zip.write(chunk, 0, k);
                }
            });
            zip.closeEntry();
        }
        zip.finish();
        zip.flush();
        raw.flush();
    }
}
