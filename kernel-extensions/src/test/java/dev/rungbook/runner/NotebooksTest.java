package dev.rungbook.runner;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertFalse;
import static org.junit.jupiter.api.Assertions.assertTrue;
import static org.junit.jupiter.api.Assumptions.assumeTrue;

import com.google.gson.JsonElement;
import com.google.gson.JsonObject;
import dev.rungbook.install.KernelSpec;
import dev.rungbook.testing.Fixtures;
import java.io.IOException;
import java.nio.charset.StandardCharsets;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.ArrayList;
import java.util.List;
import java.util.concurrent.TimeUnit;
import java.util.stream.Stream;
import org.junit.jupiter.api.DynamicTest;
import org.junit.jupiter.api.Test;
import org.junit.jupiter.api.TestFactory;

/**
 * Every notebook of {@code notebooks/} executes without an error output, with its tables as {@code text/html} and
 * its charts as {@code image/png}: through the embedded runner, and through real Jupyter (nbclient with Debian's
 * /usr/bin/python3 and the kernel spec installed in a temporary prefix; skipped when absent). The module folder is
 * the working directory, so the notebooks find the samples as {@code ../sample-tensors}, as they do in Jupyter.
 */
class NotebooksTest {
    private static final Path NOTEBOOKS = Path.of("..", "notebooks");
    private static final String PYTHON = "/usr/bin/python3";

    static List<Path> notebooks() throws IOException {
        try (Stream<Path> s = Files.list(NOTEBOOKS)) {
            return s.filter(p -> p.toString().endsWith(".ipynb")).sorted().toList();
        }
    }

    @TestFactory
    Stream<DynamicTest> everyNotebookRunsCleanlyInTheEmbeddedRunner() throws IOException {
        List<Path> all = notebooks();
        assertTrue(all.size() >= 2, "notebooks found: " + all);
        return all.stream().map(nb -> DynamicTest.dynamicTest(nb.getFileName().toString(), () -> {
            ExecutedNotebook done = NotebookRunner.create().execute(nb);
            assertEquals(List.of(), done.errors(), nb + " has failing cells");
            assertEquals(done.codeCells(), done.executedCells());
            checkOutputs(nb.toString(), done.notebook());
            assertTrue(Files.size(nb) < 2 * 1024 * 1024, nb + " is committed under 2 MiB");
        }));
    }

    /** No error output; at least one table (HTML) and one chart (PNG); every chart and table has its rich form. */
    static void checkOutputs(String name, JsonObject nb) {
        int tables = 0;
        int charts = 0;
        List<String> problems = new ArrayList<>();
        for (JsonElement c : nb.getAsJsonArray("cells")) {
            JsonObject cell = c.getAsJsonObject();
            if (!cell.get("cell_type").getAsString().equals("code")) {
                continue;
            }
            for (JsonElement o : cell.getAsJsonArray("outputs")) {
                JsonObject out = o.getAsJsonObject();
                String type = out.get("output_type").getAsString();
                if (type.equals("error")) {
                    problems.add("error output: " + out.get("ename") + " " + out.get("evalue"));
                }
                if (!out.has("data")) {
                    continue;
                }
                JsonObject data = out.getAsJsonObject("data");
                String plain = Json.text(data.get("text/plain"));
                if (plain.startsWith("XYChart") || plain.startsWith("HeatMapChart")) {
                    charts++;
                    if (!data.has("image/png")) {
                        problems.add("chart without image/png: " + plain);
                    }
                }
                if (data.has("text/html")) {
                    if (Json.text(data.get("text/html")).contains("<table")) {
                        tables++;
                    }
                } else if (plain.matches("(?s).*\\d+ rows x \\d+ columns.*")) {
                    problems.add("table without text/html: " + plain.lines().findFirst().orElse(""));
                }
            }
        }
        assertEquals(List.of(), problems, name);
        assertTrue(tables > 0, name + ": no table rendered as text/html");
        assertTrue(charts > 0, name + ": no chart rendered as image/png");
    }

    @Test
    void everyNotebookRunsCleanlyThroughJupyter() throws Exception {
        assumeTrue(hasNbclient(), PYTHON + " with nbclient and nbformat is not available; Jupyter run skipped");
        Path prefix = Fixtures.tempDir("nb-kernel").toAbsolutePath();
        KernelSpec.install(KernelSpec.prefixKernelsDir(prefix), KernelSpec.argv(List.of("-Xmx768m")));
        Path outDir = Fixtures.tempDir("nb-jupyter").toAbsolutePath();
        String script = String.join("\n",
                "import sys, nbformat, nbclient",
                "out = sys.argv[1]",
                "for path in sys.argv[2:]:",
                "    nb = nbformat.read(path, as_version=4)",
                "    client = nbclient.NotebookClient(nb, kernel_name='rungbook', timeout=300,",
                "        resources={'metadata': {'path': sys.argv[2].rsplit('/', 1)[0]}})",
                "    client.execute()",
                "    nbformat.write(nb, out + '/' + path.rsplit('/', 1)[1])",
                "    print('EXECUTED', path)");
        List<String> cmd = new ArrayList<>(List.of(PYTHON, "-c", script, outDir.toString()));
        for (Path nb : notebooks()) {
            cmd.add(nb.toAbsolutePath().normalize().toString());
        }
        ProcessBuilder pb = new ProcessBuilder(cmd).redirectErrorStream(true);
        pb.environment().put("JUPYTER_PATH", prefix.resolve("share").resolve("jupyter").toString());
        pb.environment().put("JUPYTER_PLATFORM_DIRS", "1");
        Process p = pb.start();
        byte[] bytes = p.getInputStream().readAllBytes();
        assertTrue(p.waitFor(900, TimeUnit.SECONDS), "nbclient did not finish");
        String log = new String(bytes, StandardCharsets.UTF_8);
        assertEquals(0, p.exitValue(), log);
        for (Path nb : notebooks()) {
            assertTrue(log.contains("EXECUTED " + nb.toAbsolutePath().normalize()), log);
            JsonObject executed = NotebookRunner.read(outDir.resolve(nb.getFileName()));
            checkOutputs("Jupyter: " + nb, executed);
        }
        assertFalse(log.contains("CellExecutionError"), log);
    }

    private static boolean hasNbclient() {
        try {
            Process p = new ProcessBuilder(PYTHON, "-c", "import nbclient, nbformat").redirectErrorStream(true).start();
            p.getInputStream().readAllBytes();
            return p.waitFor(60, TimeUnit.SECONDS) && p.exitValue() == 0;
        } catch (IOException e) {
            return false;
        } catch (InterruptedException e) {
            Thread.currentThread().interrupt();
            return false;
        }
    }
}
