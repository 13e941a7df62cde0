package dev.rungbook.cli;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.install.KernelSpec;
import dev.rungbook.runner.JupyterExecution;
import dev.rungbook.testing.Fixtures;
import java.nio.charset.StandardCharsets;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.List;
import java.util.concurrent.TimeUnit;
import org.junit.jupiter.api.Test;

/**
 * The README's first command as a newcomer runs it: the shaded jar's {@code demo}, from the repository root, inspects
 * the samples, installs the kernel (here under a prefix, not the user's folder) and executes notebooks 01 and 02 into
 * HTML reports with tables and charts — through Jupyter when Python has nbclient.
 */
class DemoIT {
    @Test
    void demoExecutesTheNotebooksIntoReports() throws Exception {
        Path repo = Path.of("..").toAbsolutePath().normalize();
        Path tmp = Fixtures.tempDir("demo-it").toAbsolutePath();
        Path out = tmp.resolve("demo");
        Path log = tmp.resolve("demo.log");
        String java = Path.of(System.getProperty("java.home"), "bin", "java").toString();
        Process p = new ProcessBuilder(java, "-Djava.awt.headless=true", "-jar",
                repo.resolve("kernel-extensions/target/rungbook-all.jar").toString(), "demo",
                "--kernel-prefix", tmp.resolve("prefix").toString(), "--out", out.toString())
                .directory(repo.toFile()).redirectErrorStream(true).redirectOutput(log.toFile()).start();
        assertTrue(p.waitFor(900, TimeUnit.SECONDS), "demo timed out");
        String text = Files.readString(log, StandardCharsets.UTF_8);
        assertEquals(0, p.exitValue(), text);
        assertTrue(text.contains("conveyor-mlp.f32.safetensors"), text);
        assertTrue(Files.isDirectory(KernelSpec.prefixKernelsDir(tmp.resolve("prefix")).resolve(KernelSpec.NAME)));
        boolean jupyter = JupyterExecution.find(null).isPresent();
        assertTrue(text.contains(jupyter ? "Executing through Jupyter" : "embedded runner"), text);
        for (String name : List.of("01-first-look", "02-granularity-and-range")) {
            String html = Files.readString(out.resolve(name + ".html"), StandardCharsets.UTF_8);
            assertTrue(html.contains("<table"), name + ": no table in the report");
            assertTrue(html.contains("data:image/png;base64,"), name + ": no chart image in the report");
            assertTrue(Files.size(out.resolve(name + ".ipynb")) > 0);
        }
        assertTrue(!text.contains("with the embedded runner instead"), "Jupyter execution fell back: " + text);
    }
}
