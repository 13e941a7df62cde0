package dev.rungbook.io;

import java.io.IOException;
import java.nio.ByteBuffer;
import java.nio.channels.FileChannel;
import java.nio.file.Path;
import java.nio.file.StandardOpenOption;
import java.util.List;
import java.util.Locale;
import java.util.function.Predicate;

/**
 * The explicit registry of checkpoint readers, keyed by magic bytes and file extension. To add a format, write a
 * reader producing {@link Contents} and add one line to {@link #READERS}.
 *
 * <p>Choice: the first format whose magic and extension both match; else the first whose magic matches (so that a
 * renamed file still opens); else the first whose extension matches (its reader then says precisely what is wrong).
 */
final class Formats {
    /** Reads a file into {@link Contents}. */
    interface Reader {
        Contents read(Path file) throws IOException;
    }

    /** A registered format; {@code magic} may be {@code null} for a format recognised only by extension. */
    static final class Format {
        final String name;
        final List<String> extensions;
        final Predicate<byte[]> magic;
        final Reader reader;

        Format(String name, List<String> extensions, Predicate<byte[]> magic, Reader reader) {
            this.name = name;
            this.extensions = extensions;
            this.magic = magic;
            this.reader = reader;
        }

        boolean hasExtension(String lowerName) {
            return extensions.stream().anyMatch(lowerName::endsWith);
        }

        boolean hasMagic(byte[] head) {
            return magic != null && magic.test(head);
        }
    }

    private static final byte[] ZIP_LOCAL = {'P', 'K', 3, 4};
    private static final byte[] ZIP_EMPTY = {'P', 'K', 5, 6};

    static final List<Format> READERS = List.of(
            new Format("npy", List.of(".npy"), h -> startsWith(h, NpyHeader.MAGIC), NpyReader::read),
            new Format("npz", List.of(".npz"), h -> startsWith(h, ZIP_LOCAL) || startsWith(h, ZIP_EMPTY),
                    NpzReader::read),
            new Format("safetensors", List.of(".safetensors"), h -> h.length > 8 && h[8] == '{',
                    SafetensorsReader::read),
            new Format("safetensors index", List.of(".json"), null, ShardedReader::read));

    private Formats() {
    }

    private static boolean startsWith(byte[] h, byte[] prefix) {
        if (h.length < prefix.length) {
            return false;
        }
        for (int i = 0; i < prefix.length; i++) {
            if (h[i] != prefix[i]) {
                return false;
            }
        }
        return true;
    }

    static Format choose(Path file) throws IOException {
        byte[] head;
        try (FileChannel ch = FileChannel.open(file, StandardOpenOption.READ)) {
            ByteBuffer b = ByteBuffer.allocate(16);
            while (b.hasRemaining() && ch.read(b) >= 0) {
                // fill up to 16 bytes
            }
            head = java.util.Arrays.copyOf(b.array(), b.position());
        }
        String lower = file.getFileName().toString().toLowerCase(Locale.ROOT);
        for (Format f : READERS) {
            if (f.hasMagic(head) && f.hasExtension(lower)) {
                return f;
            }
        }
        for (Format f : READERS) {
            if (f.hasMagic(head)) {
                return f;
            }
        }
        for (Format f : READERS) {
            if (f.hasExtension(lower)) {
                return f;
            }
        }
        throw new CheckpointFormatException(file, null, "unknown checkpoint format (" + head.length
                + " bytes read; expected .safetensors, .safetensors.index.json, .npy or .npz)");
    }
}
