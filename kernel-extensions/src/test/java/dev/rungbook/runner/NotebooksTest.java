package dev.rungbook.runner;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertTrue;
import static org.junit.jupiter.api.Assumptions.assumeTrue;

import com.google.gson.JsonElement;
import com.google.gson.JsonObject;
import dev.rungbook.install.KernelSpec;
import dev.rungbook.testing.Fixtures;
import java.io.IOException;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.ArrayList;
import java.util.List;
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

    @TestFactory
    Stream<DynamicTest> everyNotebookRunsCleanlyThroughJupyter() throws IOException {
        // nbclient with the installed kernel, the path `rungbook demo` takes when Python has it.
        Path prefix = Fixtures.tempDir("nb-kernel").toAbsolutePath();
        KernelSpec.install(KernelSpec.prefixKernelsDir(prefix), KernelSpec.argv(List.of("-Xmx768m")));
        java.util.Optional<JupyterExecution> jupyter = JupyterExecution.find(prefix.resolve("share").resolve("jupyter"));
        assumeTrue(jupyter.isPresent(), "no Python with nbclient and nbformat; Jupyter run skipped");
        return notebooks().stream().map(nb -> DynamicTest.dynamicTest(nb.getFileName().toString(), () -> {
            ExecutedNotebook done = jupyter.get().execute(nb, NOTEBOOKS);
            assertEquals(List.of(), done.errors(), nb + " has failing cells through Jupyter");
            assertEquals(done.codeCells(), done.executedCells());
            checkOutputs("Jupyter: " + nb, done.notebook());
        }));
    }
}
