package dev.rungbook.hostile;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTimeoutPreemptively;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.io.Checkpoint;
import dev.rungbook.io.CheckpointFormatException;
import java.io.IOException;
import java.lang.management.ManagementFactory;
import java.net.URISyntaxException;
import java.nio.charset.StandardCharsets;
import java.nio.file.Files;
import java.nio.file.Path;
import java.time.Duration;
import java.util.ArrayList;
import java.util.List;
import java.util.Locale;
import java.util.stream.Stream;
import org.junit.jupiter.api.Test;
import org.junit.jupiter.params.ParameterizedTest;
import org.junit.jupiter.params.provider.Arguments;
import org.junit.jupiter.params.provider.MethodSource;

/**
 * Opens every file of the committed hostile corpus ({@code src/test/resources/hostile}, made by
 * {@code make_hostile.py}, listed in {@code manifest.tsv}) and checks the refusal: a {@link CheckpointFormatException}
 * whose message starts with the file and contains the manifest's words, within 5 s (a hang guard, not a speed target:
 * the refusals take milliseconds; the margin is for a loaded CI machine) and under 64 MiB of heap allocated by the
 * reading thread.
 */
class HostileCorpusTest {
    static final long HEAP_BUDGET = 64L << 20;
    /** File name to refusal message (without the path), written to target/hostile-outcomes.tsv after the run. */
    static final java.util.Map<String, String> OUTCOMES = new java.util.concurrent.ConcurrentSkipListMap<>();

    @org.junit.jupiter.api.AfterAll
    static void writeOutcomes() throws IOException {
        StringBuilder b = new StringBuilder();
        OUTCOMES.forEach((k, v) -> b.append(k).append('\t').append(v.replace('\t', ' ').replace('\n', ' ')).append('\n'));
        Files.writeString(Path.of("target/hostile-outcomes.tsv"), b.toString(), StandardCharsets.UTF_8);
    }

    static Path corpus() {
        try {
            return Path.of(HostileCorpusTest.class.getResource("/hostile/manifest.tsv").toURI()).getParent();
        } catch (URISyntaxException e) {
            throw new AssertionError(e);
        }
    }

    /** Manifest rows: file name and the words its refusal must contain. */
    static List<String[]> manifest() throws IOException {
        List<String[]> rows = new ArrayList<>();
        for (String line : Files.readAllLines(corpus().resolve("manifest.tsv"), StandardCharsets.UTF_8)) {
            if (line.isBlank() || line.startsWith("#")) {
                continue;
            }
            String[] cols = line.split("\t", -1);
            rows.add(new String[] {cols[0], cols.length > 1 ? cols[1] : ""});
        }
        return rows;
    }

    static Stream<Arguments> files() throws IOException {
        return manifest().stream().map(r -> Arguments.of(r[0], r[1]));
    }

    @Test
    void manifestListsEveryCorpusFileAndNoOther() throws IOException {
        List<String> listed = manifest().stream().map(r -> r[0]).sorted().toList();
        List<String> present;
        try (Stream<Path> s = Files.list(corpus())) {
            present = s.map(p -> p.getFileName().toString())
                    .filter(n -> !n.equals("manifest.tsv") && !n.endsWith(".py")).sorted().toList();
        }
        assertEquals(present, listed);
        assertTrue(listed.size() >= 30, "corpus has only " + listed.size() + " files");
    }

    @ParameterizedTest(name = "{0}")
    @MethodSource("files")
    void refusedClearlyWithinBounds(String name, String words) {
        Path file = corpus().resolve(name);
        CheckpointFormatException e = assertTimeoutPreemptively(Duration.ofSeconds(5), () -> {
            long before = allocatedBytes();
            CheckpointFormatException x = assertThrows(CheckpointFormatException.class, () -> {
                try (Checkpoint c = Checkpoint.open(file)) {
                    for (String n : c.names()) {
                        c.tensor(n).toFloatArray();
                    }
                }
            }, name + " was accepted");
            long used = allocatedBytes() - before;
            if (before >= 0) {
                assertTrue(used < HEAP_BUDGET, name + ": refusal allocated " + used + " bytes: " + x.getMessage());
            }
            return x;
        }, name + ": no answer within 5 s");
        assertTrue(e.getMessage().startsWith(file + ": "), e.getMessage());
        OUTCOMES.put(name, e.getMessage().substring(file.toString().length() + 2));
        String msg = e.getMessage().toLowerCase(Locale.ROOT);
        for (String w : words.split("\\|")) {
            if (!w.isEmpty()) {
                assertTrue(msg.contains(w.toLowerCase(Locale.ROOT)), "expected '" + w + "' in: " + e.getMessage());
            }
        }
    }

    static long allocatedBytes() {
        java.lang.management.ThreadMXBean mx = ManagementFactory.getThreadMXBean();
        if (mx instanceof com.sun.management.ThreadMXBean sun && sun.isThreadAllocatedMemorySupported()
                && sun.isThreadAllocatedMemoryEnabled()) {
            return sun.getThreadAllocatedBytes(Thread.currentThread().getId());
        }
        return -1;
    }
}
