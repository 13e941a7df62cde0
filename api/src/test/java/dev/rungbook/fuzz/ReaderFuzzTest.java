package dev.rungbook.fuzz;

import static org.junit.jupiter.api.Assertions.assertTrue;

import com.code_intelligence.jazzer.junit.FuzzTest;
import dev.rungbook.io.Checkpoint;
import dev.rungbook.io.CheckpointFormatException;
import java.io.IOException;
import java.io.UncheckedIOException;
import java.nio.ByteBuffer;
import java.nio.ByteOrder;
import java.nio.charset.StandardCharsets;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.Comparator;
import java.util.Map;
import java.util.concurrent.ConcurrentHashMap;
import java.util.concurrent.atomic.AtomicInteger;
import java.util.stream.Stream;
import org.junit.jupiter.api.AfterAll;

/**
 * Coverage-guided fuzzing of every checkpoint reader. Each target writes the fuzzer's bytes to a file with the
 * reader's extension, opens it, lists it and loads every tensor. The only accepted failures are
 * {@link CheckpointFormatException} and an {@link IllegalArgumentException} or {@link UncheckedIOException} with a
 * message; anything else (a NullPointerException, an index error, an OutOfMemoryError, a hang caught by Jazzer's
 * per-input timeout) is a finding.
 *
 * <p>Without {@code JAZZER_FUZZ} Jazzer runs each target once per file of the committed corpus in
 * {@code src/test/resources/dev/rungbook/fuzz/ReaderFuzzTestInputs/<method>/}; {@link #everySeedRan} checks that
 * those inputs did run. {@code ./rungbook fuzz --minutes N} fuzzes for longer.
 */
class ReaderFuzzTest {
    private static final Map<String, AtomicInteger> RUNS = new ConcurrentHashMap<>();
    private static Path dir;

    private static synchronized Path dir() throws IOException {
        if (dir == null) {
            dir = Files.createTempDirectory("rungbook-fuzz");
        }
        return dir;
    }

    @AfterAll
    static void everySeedRan() throws IOException {
        if (System.getenv("JAZZER_FUZZ") == null) {
            for (String method : new String[] {"safetensors", "shardedIndex", "npy", "npz"}) {
                int seeds = seedCount(method);
                assertTrue(seeds > 0, "no committed seeds for " + method);
                int ran = RUNS.getOrDefault(method, new AtomicInteger()).get();
                // Jazzer also runs an empty input in regression mode, hence >=.
                assertTrue(ran >= seeds, method + ": ran " + ran + " inputs, corpus has " + seeds);
            }
        }
        if (dir != null) {
            try (Stream<Path> s = Files.walk(dir)) {
                s.sorted(Comparator.reverseOrder()).forEach(p -> p.toFile().delete());
            }
        }
    }

    private static int seedCount(String method) throws IOException {
        Path p = Path.of("src/test/resources/dev/rungbook/fuzz/ReaderFuzzTestInputs", method);
        if (!Files.isDirectory(p)) {
            return 0;
        }
        try (Stream<Path> s = Files.list(p)) {
            return (int) s.filter(Files::isRegularFile).count();
        }
    }

    @FuzzTest(maxDuration = "30m")
    void safetensors(byte[] input) throws IOException {
        openAndLoad("safetensors", "f.safetensors", input);
    }

    @FuzzTest(maxDuration = "30m")
    void shardedIndex(byte[] input) throws IOException {
        Path d = dir();
        Path shard = d.resolve("a.safetensors");
        if (!Files.exists(shard)) {
            byte[] header = "{\"w\":{\"dtype\":\"F32\",\"shape\":[2],\"data_offsets\":[0,8]}}"
                    .getBytes(StandardCharsets.UTF_8);
            ByteBuffer b = ByteBuffer.allocate(8 + header.length + 8).order(ByteOrder.LITTLE_ENDIAN);
            b.putLong(header.length).put(header).putFloat(1f).putFloat(2f);
            Files.write(shard, b.array());
        }
        openAndLoad("shardedIndex", "f.safetensors.index.json", input);
    }

    @FuzzTest(maxDuration = "30m")
    void npy(byte[] input) throws IOException {
        openAndLoad("npy", "f.npy", input);
    }

    @FuzzTest(maxDuration = "30m")
    void npz(byte[] input) throws IOException {
        openAndLoad("npz", "f.npz", input);
    }

    private static void openAndLoad(String method, String name, byte[] input) throws IOException {
        RUNS.computeIfAbsent(method, k -> new AtomicInteger()).incrementAndGet();
        Path file = dir().resolve(name);
        Files.write(file, input);
        try (Checkpoint c = Checkpoint.open(file)) {
            for (String n : c.names()) {
                c.info(n);
                c.tensor(n).toFloatArray();
            }
            c.metadata();
        } catch (CheckpointFormatException e) {
            requireMessage(e);
        } catch (IllegalArgumentException | UncheckedIOException e) {
            requireMessage(e);
        }
    }

    private static void requireMessage(RuntimeException e) {
        if (e.getMessage() == null || e.getMessage().isBlank()) {
            throw new AssertionError("refusal without a message", e);
        }
    }
}
