package dev.rungbook.install;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertTrue;

import com.google.gson.JsonParser;
import dev.rungbook.testing.Fixtures;
import java.nio.charset.StandardCharsets;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.ArrayList;
import java.util.List;
import java.util.concurrent.TimeUnit;
import org.junit.jupiter.api.Test;

/**
 * The shaded jar's {@code kernel install} makes a class-data archive that the kernel's JVM can map: the kernel spec
 * names it and a JVM started with {@code -Xshare:on} (which refuses to start when the archive does not fit) runs the
 * warm-up cells with it.
 */
class ClassArchiveIT {
    private static final Path JAR = Path.of("target", "rungbook-all.jar").toAbsolutePath();

    @Test
    void installMakesAnArchiveTheKernelJvmMaps() throws Exception {
        Path prefix = Fixtures.tempDir("archive-it");
        String java = Path.of(System.getProperty("java.home"), "bin", "java").toString();
        assertEquals(0, run(List.of(java, "-jar", JAR.toString(), "kernel", "install", "--prefix", prefix.toString())));
        Path spec = KernelSpec.prefixKernelsDir(prefix).resolve(KernelSpec.NAME);
        List<String> argv = new ArrayList<>();
        JsonParser.parseString(Files.readString(spec.resolve("kernel.json"))).getAsJsonObject()
                .getAsJsonArray("argv").forEach(e -> argv.add(e.getAsString()));
        Path archive = spec.resolve(KernelSpec.CLASS_ARCHIVE).toAbsolutePath();
        assertTrue(argv.contains("-XX:SharedArchiveFile=" + archive), argv.toString());
        assertTrue(Files.size(archive) > 1_000_000, "archive of " + Files.size(archive) + " bytes");
        // Source: JDK 17 java(1) manual, "Application Class Data Sharing": with -Xshare:on the JVM exits with an
        // error when the archive cannot be used.
        // The kernel's own command line (same module options as the training run), with -Xshare:on added and the
        // warm-up cells instead of a connection.
        List<String> warm = new ArrayList<>(argv.subList(0, argv.size() - 2));
        warm.add(1, "-Xshare:on");
        warm.add("warm-up");
        assertEquals(0, run(warm));
    }

    private static int run(List<String> command) throws Exception {
        Path log = Files.createTempFile("archive-it", ".log");
        Process p = new ProcessBuilder(command).redirectErrorStream(true).redirectOutput(log.toFile()).start();
        try {
            assertTrue(p.waitFor(300, TimeUnit.SECONDS), "timed out: " + command);
            if (p.exitValue() != 0) {
                System.err.println(Files.readString(log, StandardCharsets.UTF_8));
            }
            return p.exitValue();
        } finally {
            p.destroyForcibly();
            Files.deleteIfExists(log);
        }
    }
}
