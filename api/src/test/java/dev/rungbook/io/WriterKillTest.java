package dev.rungbook.io;

import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.tensor.Tensor;
import java.io.BufferedReader;
import java.io.IOException;
import java.io.InputStreamReader;
import java.io.UncheckedIOException;
import java.nio.charset.StandardCharsets;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.ArrayList;
import java.util.List;
import java.util.Map;
import java.util.TreeMap;
import java.util.concurrent.CompletableFuture;
import java.util.concurrent.TimeUnit;
import java.util.stream.Collectors;
import java.util.stream.Stream;
import org.junit.jupiter.api.AfterAll;
import org.junit.jupiter.api.AfterEach;
import org.junit.jupiter.api.Test;
import org.junit.jupiter.api.io.TempDir;

/**
 * No data lost (issue 9): a writer in a separate JVM ({@link WriterToKill}) is killed with {@code destroyForcibly}
 * (SIGKILL: no shutdown hook, no finally block runs) while it replaces an existing file; the old file must be intact
 * byte for byte, no partial target may exist, and the only trace is the writer's temporary file
 * {@code .<target>.<random>.tmp} in the same folder, which a later write does not reuse (the test removes it). Also:
 * writers refuse to replace a file an open checkpoint reads, under any of its names.
 *
 * <p>Outcomes go to {@code api/target/writer-kill.tsv} for docs/make_reliability.py.
 */
class WriterKillTest {
    private static final Map<String, String> OUTCOMES = new TreeMap<>();
    private static final int MIB = 48;

    @TempDir
    Path dir;
    private Process child;

    @AfterEach
    void killLeftover() throws InterruptedException {
        if (child != null && child.isAlive()) {
            child.destroyForcibly();
            child.waitFor(30, TimeUnit.SECONDS);
        }
    }

    private Process start(String... args) throws IOException {
        List<String> cmd = new ArrayList<>(List.of(Path.of(System.getProperty("java.home"), "bin", "java").toString(),
                "-Xmx256m", "-XX:TieredStopAtLevel=1", "-cp", System.getProperty("java.class.path"),
                WriterToKill.class.getName()));
        cmd.addAll(List.of(args));
        child = new ProcessBuilder(cmd).redirectError(ProcessBuilder.Redirect.INHERIT).start();
        return child;
    }

    /** Waits (at most 2 minutes) for a line of the child's output equal to {@code marker}. */
    private static void awaitLine(Process p, String marker) throws Exception {
        BufferedReader r = new BufferedReader(new InputStreamReader(p.getInputStream(), StandardCharsets.UTF_8));
        CompletableFuture<Boolean> seen = CompletableFuture.supplyAsync(() -> {
            try {
                for (String line = r.readLine(); line != null; line = r.readLine()) {
                    if (line.equals(marker)) {
                        return true;
                    }
                }
                return false;
            } catch (IOException e) {
                throw new UncheckedIOException(e);
            }
        });
        assertTrue(seen.get(2, TimeUnit.MINUTES), "the writer ended without printing " + marker);
    }

    private List<Path> temporaries(Path target) throws IOException {
        String prefix = "." + target.getFileName() + ".";
        try (Stream<Path> s = Files.list(dir)) {
            return s.filter(p -> p.getFileName().toString().startsWith(prefix)
                    && p.getFileName().toString().endsWith(".tmp")).collect(Collectors.toList());
        }
    }

    private List<String> names() throws IOException {
        try (Stream<Path> s = Files.list(dir)) {
            return s.map(p -> p.getFileName().toString()).sorted().collect(Collectors.toList());
        }
    }

    private static void kill(Process p) throws InterruptedException {
        p.destroyForcibly();
        assertTrue(p.waitFor(30, TimeUnit.SECONDS), "the killed writer did not end");
    }

    @Test
    void killedCheckpointWriterLeavesTheOldFileIntact() throws Exception {
        Path target = dir.resolve("model.safetensors");
        Checkpoint.write(target, Map.of("old", Tensor.of(new float[] {1, 2, 3}, 3)), Map.of("version", "1"));
        byte[] before = Files.readAllBytes(target);

        Process p = start("stall", target.toString(), Integer.toString(MIB));
        awaitLine(p, "MID-WRITE");
        List<Path> tmp = temporaries(target);
        assertEquals(1, tmp.size(), "one temporary file while writing: " + names());
        long partial = Files.size(tmp.get(0));
        assertTrue(partial >= MIB * (1L << 20), "tensor a is in the temporary file: " + partial + " bytes");
        kill(p);

        assertArrayEquals(before, Files.readAllBytes(target), "the old checkpoint is intact byte for byte");
        try (Checkpoint c = Checkpoint.open(target)) {
            assertEquals(List.of("old"), c.names());
            assertArrayEquals(new float[] {1, 2, 3}, c.tensor("old").toFloatArray());
        }
        assertEquals(List.of("." + target.getFileName() + "." + tmpId(tmp.get(0)) + ".tmp", "model.safetensors"),
                names(), "the target and the killed writer's temporary file, nothing else");
        // the leftover is the half-written checkpoint: readers refuse it as truncated
        CheckpointFormatException e = assertThrows(CheckpointFormatException.class, () -> {
            try (Checkpoint c = Checkpoint.open(tmp.get(0))) {
                c.tensors().values().forEach(Tensor::toFloatArray);
            }
        });
        assertTrue(e.getMessage().contains("beyond the end"), e.getMessage());
        Files.delete(tmp.get(0));
        // a later write goes through as usual
        Checkpoint.write(target, Map.of("new", Tensor.of(new float[] {4}, 1)));
        try (Checkpoint c = Checkpoint.open(target)) {
            assertEquals(List.of("new"), c.names());
        }
        assertEquals(List.of("model.safetensors"), names());
        record("checkpoint writer killed mid-write (48 MiB safetensors over an existing file)", "old file intact byte"
                + " for byte; one leftover " + partial + "-byte temporary file, refused as truncated");
    }

    private static String tmpId(Path tmp) {
        String n = tmp.getFileName().toString();
        return n.substring(n.lastIndexOf('.', n.length() - 5) + 1, n.length() - 4);
    }

    @Test
    void killedReportWriterLeavesTheOldFileIntact() throws Exception {
        Path target = dir.resolve("report.html");
        byte[] before = "<html><body>the old report</body></html>\n".getBytes(StandardCharsets.UTF_8);
        dev.rungbook.internal.AtomicFile.write(target, before);

        Process p = start("report", target.toString());
        awaitLine(p, "MID-WRITE");
        List<Path> tmp = temporaries(target);
        assertEquals(1, tmp.size(), names().toString());
        assertTrue(Files.size(tmp.get(0)) >= 1 << 20, "the first MiB is in the temporary file");
        kill(p);

        assertArrayEquals(before, Files.readAllBytes(target), "the old report is intact byte for byte");
        assertEquals(2, names().size(), "the target and one temporary file: " + names());
        Files.delete(tmp.get(0));
        record("report writer (AtomicFile) killed after its first MiB", "old file intact byte for byte; one leftover"
                + " temporary file");
    }

    @Test
    void writerKilledAtAnUnknownMomentLeavesOldOrNewNeverPartial() throws Exception {
        // No stall: the kill lands as soon as the temporary file appears, wherever the writer then is. Either
        // outcome is fine (the old file, or the complete new one if the rename won the race); a mix is not.
        Path target = dir.resolve("race.safetensors");
        Checkpoint.write(target, Map.of("old", Tensor.of(new float[] {7}, 1)));
        byte[] before = Files.readAllBytes(target);
        Process p = start("run", target.toString(), Integer.toString(MIB));
        awaitLine(p, "STARTED");
        long deadline = System.nanoTime() + TimeUnit.MINUTES.toNanos(2);
        while (temporaries(target).isEmpty() && p.isAlive() && System.nanoTime() < deadline) {
            Thread.onSpinWait();
        }
        kill(p);
        byte[] after = Files.readAllBytes(target);
        String outcome;
        if (java.util.Arrays.equals(before, after)) {
            outcome = "old file intact";
        } else {
            try (Checkpoint c = Checkpoint.open(target)) {
                float[] a = c.tensor("a").toFloatArray();
                for (int i = 0; i < a.length; i += 4099) {
                    assertEquals(WriterToKill.valueA(i), a[i], "complete new checkpoint at " + i);
                }
                assertEquals(1024, c.tensor("z").size());
            }
            outcome = "the rename won the race: complete new file";
        }
        for (Path t : temporaries(target)) {
            Files.delete(t);
        }
        record("checkpoint writer killed when its temporary file appears", outcome);
    }

    @Test
    void writersRefuseToReplaceAnOpenInputUnderAnyName() throws IOException {
        Path file = dir.resolve("in.safetensors");
        Checkpoint.write(file, Map.of("w", Tensor.of(new float[] {1, 2}, 2)));
        byte[] before = Files.readAllBytes(file);
        Path hard = dir.resolve("hard.safetensors");
        Files.createLink(hard, file);
        try (Checkpoint c = Checkpoint.open(file)) {
            Map<String, Tensor> out = Map.of("w", c.tensor("w"));
            for (Path name : List.of(file, hard, dir.resolve(".").resolve("in.safetensors"))) {
                IllegalStateException e = assertThrows(IllegalStateException.class, () -> Checkpoint.write(name, out),
                        name.toString());
                assertTrue(e.getMessage().contains("refusing to overwrite a file that an open Checkpoint reads"),
                        e.getMessage());
            }
        }
        assertArrayEquals(before, Files.readAllBytes(file));
        assertEquals(List.of("hard.safetensors", "in.safetensors"), names(), "no temporary file left");
        record("Checkpoint.write onto the file an open Checkpoint reads (same path, hard link, other spelling)",
                "refused with IllegalStateException; file unchanged");
    }

    private static synchronized void record(String what, String outcome) {
        OUTCOMES.put(what, outcome);
    }

    @AfterAll
    static void writeOutcomes() throws IOException {
        long tests = java.util.Arrays.stream(WriterKillTest.class.getDeclaredMethods())
                .filter(m -> m.isAnnotationPresent(Test.class)).count();
        if (OUTCOMES.size() != tests) {
            return; // a partial run must not replace the figures of a full one
        }
        StringBuilder b = new StringBuilder("case\toutcome\n");
        OUTCOMES.forEach((k, v) -> b.append(k).append('\t').append(v).append('\n'));
        Path out = Path.of("target", "writer-kill.tsv");
        Files.createDirectories(out.getParent());
        Files.writeString(out, b.toString());
    }
}
