package dev.rungbook.io;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.testing.Fixtures;
import java.io.IOException;
import java.lang.management.ManagementFactory;
import java.net.URISyntaxException;
import java.nio.ByteBuffer;
import java.nio.ByteOrder;
import java.nio.charset.StandardCharsets;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.Locale;

/** Helpers for the checkpoint tests: byte layouts built by hand, golden files, and refusal checks. */
final class IoFixtures {
    /** Heap a refusal of a small hostile file may allocate (issue 9 asks for a bound of 64 MiB). */
    static final long REFUSAL_HEAP_BUDGET = 64L << 20;

    private IoFixtures() {
    }

    /** The committed golden files made by {@code src/test/resources/io/make_golden.py}. */
    static Path golden(String name) {
        try {
            return Path.of(IoFixtures.class.getResource("/io/golden/expected.json").toURI()).resolveSibling(name);
        } catch (URISyntaxException e) {
            throw new AssertionError(e);
        }
    }

    static Path tempDir() throws IOException {
        return Fixtures.tempDir("io");
    }

    /** A safetensors file: 8-byte little-endian header length, the header text as given, then {@code data}. */
    static byte[] safetensors(String header, byte[] data) {
        return safetensorsRaw(header.getBytes(StandardCharsets.UTF_8), data);
    }

    static byte[] safetensorsRaw(byte[] header, byte[] data) {
        ByteBuffer b = ByteBuffer.allocate(8 + header.length + data.length).order(ByteOrder.LITTLE_ENDIAN);
        b.putLong(header.length).put(header).put(data);
        return b.array();
    }

    /** Little-endian bytes of float32 values. */
    static byte[] f32(float... v) {
        ByteBuffer b = ByteBuffer.allocate(v.length * 4).order(ByteOrder.LITTLE_ENDIAN);
        for (float x : v) {
            b.putFloat(x);
        }
        return b.array();
    }

    static Path write(Path dir, String name, byte[] content) throws IOException {
        Path p = dir.resolve(name);
        Files.write(p, content);
        return p;
    }

    /**
     * Asserts that opening {@code file} and loading every tensor is refused with a {@link CheckpointFormatException}
     * whose message names the file and contains each fragment (case-insensitive), within the heap budget.
     */
    static CheckpointFormatException assertRefused(Path file, String... fragments) {
        long before = allocatedBytes();
        CheckpointFormatException e = assertThrows(CheckpointFormatException.class, () -> {
            try (Checkpoint c = Checkpoint.open(file)) {
                for (String n : c.names()) {
                    c.tensor(n).toFloatArray();
                }
            }
        });
        long used = allocatedBytes() - before;
        if (before >= 0) {
            assertTrue(used < REFUSAL_HEAP_BUDGET, "refusal allocated " + used + " bytes: " + e.getMessage());
        }
        assertEquals(file, e.file(), e.getMessage());
        assertTrue(e.getMessage().startsWith(file.toString() + ": "), e.getMessage());
        String msg = e.getMessage().toLowerCase(Locale.ROOT);
        for (String f : fragments) {
            assertTrue(msg.contains(f.toLowerCase(Locale.ROOT)), "expected '" + f + "' in: " + e.getMessage());
        }
        return e;
    }

    /** Bytes this thread has allocated so far, or -1 where the JVM cannot tell. */
    static long allocatedBytes() {
        java.lang.management.ThreadMXBean mx = ManagementFactory.getThreadMXBean();
        if (mx instanceof com.sun.management.ThreadMXBean) {
            com.sun.management.ThreadMXBean sun = (com.sun.management.ThreadMXBean) mx;
            if (sun.isThreadAllocatedMemorySupported() && sun.isThreadAllocatedMemoryEnabled()) {
                return sun.getThreadAllocatedBytes(Thread.currentThread().getId());
            }
        }
        return -1;
    }
}
