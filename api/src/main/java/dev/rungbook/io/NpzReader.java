package dev.rungbook.io;

import java.io.IOException;
import java.io.InputStream;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.Enumeration;
import java.util.zip.CRC32;
import java.util.zip.CheckedInputStream;
import java.util.zip.ZipEntry;
import java.util.zip.ZipException;
import java.util.zip.ZipFile;

/**
 * Reads a NumPy {@code .npz} archive: a zip of {@code .npy} members, stored or deflated, each named by its member name
 * without {@code .npy}. Only the small headers are read on open; an array's data is read (and inflated) when the
 * tensor is first used.
 *
 * <p>Zip bombs: the sizes a zip declares are not trusted for allocation. A member's data size comes from its
 * {@code .npy} header shape; it must not exceed what the member's compressed bytes can produce (equal to them when
 * stored, at most {@value #MAX_DEFLATE_RATIO} times them when deflated, deflate's largest possible ratio), the
 * compressed size must lie within the file, and exactly that many bytes are read, then the stream must end and the
 * CRC-32 must match.
 */
final class NpzReader {
    /** Deflate's largest possible expansion: a 258-byte match coded in 2 bits gives about 1032:1. */
    static final long MAX_DEFLATE_RATIO = 1032;
    private static final long SLACK = 4096;

    private NpzReader() {
    }

    static Contents read(Path file) throws IOException {
        ZipFile zip;
        try {
            zip = new ZipFile(file.toFile());
        } catch (ZipException e) {
            throw new CheckpointFormatException(file, null, "not a valid zip archive: " + e.getMessage(), e);
        }
        Contents c = new Contents("npz");
        c.resources.add(zip);
        c.files.add(file);
        long fileSize = Files.size(file);
        try {
            Enumeration<? extends ZipEntry> all = zip.entries();
            while (all.hasMoreElements()) {
                ZipEntry ze = all.nextElement();
                if (ze.isDirectory()) {
                    continue;
                }
                String name = ze.getName().endsWith(".npy")
                        ? ze.getName().substring(0, ze.getName().length() - 4) : ze.getName();
                c.add(entry(file, zip, ze, name, fileSize));
            }
            return c;
        } catch (RuntimeException | IOException e) {
            c.closeAll();
            throw e;
        }
    }

    private static Entry entry(Path file, ZipFile zip, ZipEntry ze, String name, long fileSize) throws IOException {
        long csize = ze.getCompressedSize();
        if (csize < 0 || csize > fileSize) {
            throw new CheckpointFormatException(file, name, "zip member declares " + csize
                    + " compressed bytes in a file of " + fileSize);
        }
        boolean stored = ze.getMethod() == ZipEntry.STORED;
        if (!stored && ze.getMethod() != ZipEntry.DEFLATED) {
            throw new CheckpointFormatException(file, name, "zip member uses compression method " + ze.getMethod()
                    + " (supported: stored, deflated)");
        }
        long budget = stored ? csize : csize * MAX_DEFLATE_RATIO + SLACK;
        NpyHeader h;
        try (InputStream in = open(file, zip, ze, name)) {
            h = NpyHeader.read(file, name, new StreamSource(in), budget);
        } catch (ZipException e) {
            throw new CheckpointFormatException(file, name, "corrupt zip member: " + e.getMessage(), e);
        }
        long count = NpyReader.checkedCount(file, name, h);
        long bytes = count * h.dtype.byteSize();
        long total = h.dataOffset + bytes;
        if (total < 0 || total > budget) {
            throw new CheckpointFormatException(file, name, "shape " + Layout.shapeText(h.shape) + " of " + h.dtype
                    + " needs " + bytes + " bytes of data, more than the member's " + csize + " "
                    + (stored ? "stored bytes hold: truncated" : "compressed bytes can inflate to (zip bomb?)"));
        }
        if (stored && total != csize) {
            throw new CheckpointFormatException(file, name, (csize - total) + " unexpected bytes after the "
                    + bytes + " bytes of data that shape " + Layout.shapeText(h.shape) + " of " + h.dtype + " needs");
        }
        return new Entry(file, name, h.dtype, h.shape, count) {
            @Override
            float[] read(int[] intShape) throws IOException {
                float[] dst = new float[(int) count];
                CRC32 crc = new CRC32();
                try (InputStream raw = open(file, zip, ze, name);
                        CheckedInputStream in = new CheckedInputStream(raw, crc)) {
                    in.readNBytes(Math.toIntExact(h.dataOffset));
                    try {
                        Decode.fromStream(in, dtype, h.order, dst);
                    } catch (java.io.EOFException e) {
                        throw new CheckpointFormatException(file, name, "truncated: " + e.getMessage());
                    }
                    if (in.read() >= 0) {
                        throw new CheckpointFormatException(file, name, "zip member holds more bytes than shape "
                                + Layout.shapeText(shape) + " of " + dtype + " needs");
                    }
                    if (ze.getCrc() != -1 && crc.getValue() != ze.getCrc()) {
                        throw new CheckpointFormatException(file, name, "CRC-32 mismatch: the data is corrupt");
                    }
                } catch (ZipException e) {
                    throw new CheckpointFormatException(file, name, "corrupt zip member: " + e.getMessage(), e);
                }
                return h.fortran ? Layout.fortranToC(dst, intShape) : dst;
            }
        };
    }

    private static InputStream open(Path file, ZipFile zip, ZipEntry ze, String name) throws IOException {
        try {
            return zip.getInputStream(ze);
        } catch (ZipException e) {
            throw new CheckpointFormatException(file, name, "corrupt zip member: " + e.getMessage(), e);
        }
    }

    /** Sequential reads from a stream through the {@link NpyHeader.Source} interface. */
    private static final class StreamSource implements NpyHeader.Source {
        private final InputStream in;
        private long pos;

        StreamSource(InputStream in) {
            this.in = in;
        }

        @Override
        public byte[] read(int offset, int length) throws IOException {
            if (offset != pos) {
                throw new IllegalStateException("header reads must be sequential");
            }
            byte[] b = in.readNBytes(length); // grows as bytes arrive: no allocation from the length alone
            pos += b.length;
            return b;
        }
    }
}
