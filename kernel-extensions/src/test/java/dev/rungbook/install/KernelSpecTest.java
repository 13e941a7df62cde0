package dev.rungbook.install;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertFalse;
import static org.junit.jupiter.api.Assertions.assertTrue;

import com.google.gson.JsonObject;
import com.google.gson.JsonParser;
import dev.rungbook.cli.Main;
import dev.rungbook.testing.Fixtures;
import java.awt.image.BufferedImage;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.List;
import java.util.stream.Stream;
import javax.imageio.ImageIO;
import org.junit.jupiter.api.Test;

class KernelSpecTest {
    @Test
    void installsKernelJsonAndLogos() throws Exception {
        Path kernels = Fixtures.tempDir("spec").resolve("kernels");
        Path dir = KernelSpec.install(kernels, KernelSpec.argv(List.of("-Xmx4g")));
        assertEquals(kernels.resolve("rungbook"), dir);
        JsonObject spec = JsonParser.parseString(Files.readString(dir.resolve("kernel.json"))).getAsJsonObject();
        // Source: Jupyter client docs, "Kernel specs": argv, display_name, language, interrupt_mode.
        assertEquals("Java (Rungbook)", spec.get("display_name").getAsString());
        assertEquals("java", spec.get("language").getAsString());
        assertEquals("message", spec.get("interrupt_mode").getAsString());
        List<String> argv = spec.getAsJsonArray("argv").asList().stream().map(e -> e.getAsString()).toList();
        assertEquals(Path.of(System.getProperty("java.home"), "bin", "java").toString(), argv.get(0));
        boolean vector = java.lang.module.ModuleFinder.ofSystem().find("jdk.incubator.vector").isPresent();
        assertEquals(vector ? List.of("--add-modules=jdk.incubator.vector", "-Xmx4g") : List.of("-Xmx4g"),
                argv.subList(1, argv.indexOf("-Djava.awt.headless=true")));
        assertEquals(List.of("kernel", "run", "{connection_file}"), argv.subList(argv.size() - 3, argv.size()));
        for (int size : new int[] {32, 64}) {
            BufferedImage logo = ImageIO.read(dir.resolve("logo-" + size + "x" + size + ".png").toFile());
            assertEquals(size, logo.getWidth());
            assertEquals(size, logo.getHeight());
        }
    }

    @Test
    void reinstallReplacesAndRemoveDeletesWithoutLeftovers() throws Exception {
        Path kernels = Fixtures.tempDir("spec").resolve("kernels");
        KernelSpec.install(kernels, KernelSpec.argv(List.of("-Xmx1g")));
        KernelSpec.install(kernels, KernelSpec.argv(List.of("-Xmx2g")));
        assertTrue(Files.readString(kernels.resolve("rungbook/kernel.json")).contains("-Xmx2g"));
        try (Stream<Path> s = Files.list(kernels)) {
            assertEquals(List.of(kernels.resolve("rungbook")), s.toList(), "no temporary folders left");
        }
        assertTrue(KernelSpec.remove(kernels));
        assertFalse(KernelSpec.remove(kernels));
        try (Stream<Path> s = Files.list(kernels)) {
            assertEquals(0, s.count());
        }
    }

    @Test
    void commandLineInstallsIntoAPrefix() throws Exception {
        Path prefix = Fixtures.tempDir("prefix");
        assertEquals(0, Main.run("kernel", "install", "--prefix", prefix.toString(), "--jvm-opt", "-Xmx3g"));
        Path json = prefix.resolve("share/jupyter/kernels/rungbook/kernel.json");
        assertTrue(Files.readString(json).contains("-Xmx3g"));
        assertEquals(0, Main.run("kernel", "remove", "--prefix", prefix.toString()));
        assertFalse(Files.exists(json));
        assertEquals(1, Main.run("kernel", "remove", "--prefix", prefix.toString()));
    }

    @Test
    void runReportsAMissingOrInvalidConnectionFileClearly() throws Exception {
        Path dir = Fixtures.tempDir("conn");
        assertEquals(1, Main.run("kernel", "run", dir.resolve("missing.json").toString()));
        Path bad = dir.resolve("bad.json");
        Files.writeString(bad, "{\"nope\": 1}");
        assertEquals(1, Main.run("kernel", "run", bad.toString()));
    }

    @Test
    void rejectsAbsurdLogoSizes() {
        org.junit.jupiter.api.Assertions.assertThrows(IllegalArgumentException.class, () -> Logo.png(4096));
    }
}
