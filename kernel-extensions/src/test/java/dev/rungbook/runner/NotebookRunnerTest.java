package dev.rungbook.runner;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertFalse;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import com.google.gson.JsonArray;
import com.google.gson.JsonObject;
import com.google.gson.JsonParser;
import dev.rungbook.testing.Fixtures;
import java.nio.charset.StandardCharsets;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.Base64;
import java.util.List;
import java.util.stream.Stream;
import org.junit.jupiter.api.BeforeAll;
import org.junit.jupiter.api.Test;

/** Executes small notebooks through the embedded runner and checks the recorded nbformat outputs. */
class NotebookRunnerTest {
    private static ExecutedNotebook stopped;
    private static ExecutedNotebook continued;

    static JsonObject notebook(String... cells) {
        JsonObject nb = new JsonObject();
        nb.addProperty("nbformat", 4);
        nb.addProperty("nbformat_minor", 5);
        nb.add("metadata", new JsonObject());
        JsonArray a = new JsonArray();
        for (int i = 0; i < cells.length; i++) {
            JsonObject c = new JsonObject();
            boolean md = cells[i].startsWith("#");
            c.addProperty("cell_type", md ? "markdown" : "code");
            c.addProperty("id", "c" + i);
            c.add("metadata", new JsonObject());
            // nbformat allows the source as a list of lines; use that form for code cells.
            JsonArray lines = new JsonArray();
            cells[i].lines().forEach(l -> lines.add(l + "\n"));
            c.add("source", md ? new com.google.gson.JsonPrimitive(cells[i]) : lines);
            if (!md) {
                c.add("outputs", new JsonArray());
                c.add("execution_count", com.google.gson.JsonNull.INSTANCE);
            }
            a.add(c);
        }
        nb.add("cells", a);
        return nb;
    }

    static final String[] CELLS = {
        "# Title\n\nSome *prose* with `code`.",
        "System.out.println(\"hello\");\nSystem.err.println(\"warn\");",
        "1 + 1",
        "Table.create(\"t\", IntColumn.create(\"n\", 1, 2, 3))",
        "Charts.histogram(Tensor.of(new float[] {1, 2, 2, 3, 3, 3}, 6))",
        "String id = display(\"shown\");\nupdateDisplay(id, \"updated\");",
        "int x = 1;\nthrow new IllegalStateException(\"boom \" + x);",
        "System.out.println(\"after\");",
        "int y = \"text\";",
    };

    @BeforeAll
    static void run() {
        JsonObject nb = notebook(CELLS);
        stopped = NotebookRunner.create().execute(Path.of("small.ipynb"), nb);
        continued = NotebookRunner.create().continueOnError(true).execute(Path.of("small.ipynb"), nb);
    }

    private static JsonObject cell(ExecutedNotebook e, int i) {
        return e.notebook().getAsJsonArray("cells").get(i).getAsJsonObject();
    }

    private static JsonObject output(ExecutedNotebook e, int cell, int k) {
        return cell(e, cell).getAsJsonArray("outputs").get(k).getAsJsonObject();
    }

    @Test
    void recordsStreamsSeparatelyPerStream() {
        JsonObject out = output(stopped, 1, 0);
        assertEquals("stream", out.get("output_type").getAsString());
        assertEquals("stdout", out.get("name").getAsString());
        assertEquals("hello\n", out.get("text").getAsString());
        JsonObject err = output(stopped, 1, 1);
        assertEquals("stderr", err.get("name").getAsString());
        assertEquals("warn\n", err.get("text").getAsString());
        assertEquals(1, cell(stopped, 1).get("execution_count").getAsInt());
    }

    @Test
    void recordsValuesAsExecuteResultsWithTheirMimeTypes() {
        JsonObject value = output(stopped, 2, 0);
        assertEquals("execute_result", value.get("output_type").getAsString());
        assertEquals(2, value.get("execution_count").getAsInt());
        assertEquals("2", value.getAsJsonObject("data").get("text/plain").getAsString());

        JsonObject table = output(stopped, 3, 0).getAsJsonObject("data");
        assertTrue(table.get("text/html").getAsString().contains("<table"), table.toString());

        JsonObject chart = output(stopped, 4, 0).getAsJsonObject("data");
        byte[] png = Base64.getDecoder().decode(chart.get("image/png").getAsString());
        // Source: PNG specification (ISO/IEC 15948), section 5.2: the eight-byte signature 137 80 78 71 13 10 26 10.
        assertEquals(List.of(137, 80, 78, 71, 13, 10, 26, 10), Stream.of(0, 1, 2, 3, 4, 5, 6, 7)
                .map(i -> png[i] & 0xff).toList());
        assertTrue(chart.get("image/svg+xml").getAsString().contains("<svg"));
    }

    @Test
    void displayDataIsUpdatedInPlace() {
        JsonArray outs = cell(stopped, 5).getAsJsonArray("outputs");
        assertEquals(1, outs.size(), outs.toString());
        assertEquals("display_data", outs.get(0).getAsJsonObject().get("output_type").getAsString());
        assertEquals("updated", outs.get(0).getAsJsonObject().getAsJsonObject("data").get("text/plain")
                .getAsString());
    }

    @Test
    void recordsTheErrorAndStopsThere() {
        JsonObject err = output(stopped, 6, 0);
        assertEquals("error", err.get("output_type").getAsString());
        assertEquals("java.lang.IllegalStateException", err.get("ename").getAsString());
        assertEquals("boom 1", err.get("evalue").getAsString());
        assertTrue(err.getAsJsonArray("traceback").get(0).getAsString().contains("boom 1"));
        assertTrue(err.getAsJsonArray("traceback").toString().contains("line 2"), err.toString());
        assertTrue(cell(stopped, 7).get("execution_count").isJsonNull());
        assertEquals(0, cell(stopped, 7).getAsJsonArray("outputs").size());
        assertEquals(List.of(new ExecutedNotebook.CellError(6, 6, "java.lang.IllegalStateException", "boom 1")),
                stopped.errors());
        assertEquals(8, stopped.codeCells());
        assertEquals(6, stopped.executedCells());
    }

    @Test
    void continuesAfterErrorsWhenAskedAndRecordsCompileErrors() {
        assertEquals("after\n", output(continued, 7, 0).get("text").getAsString());
        JsonObject compile = output(continued, 8, 0);
        assertEquals("CompileError", compile.get("ename").getAsString());
        assertTrue(compile.get("evalue").getAsString().contains("incompatible types"), compile.toString());
        assertEquals(2, continued.errors().size());
        assertEquals(8, continued.executedCells());
    }

    @Test
    void writesNotebookAndReportAtomically() throws Exception {
        Path dir = Fixtures.tempDir("runner-out");
        Path file = dir.resolve("small.ipynb");
        Files.writeString(file, "old content");
        stopped.write(file);
        stopped.writeHtml(dir.resolve("small.html"));
        try (Stream<Path> s = Files.list(dir)) {
            assertEquals(List.of("small.html", "small.ipynb"), s.map(p -> p.getFileName().toString()).sorted()
                    .toList(), "no temporary files are left behind");
        }
        JsonObject back = JsonParser.parseString(Files.readString(file)).getAsJsonObject();
        assertEquals(4, back.get("nbformat").getAsInt());
        assertEquals(stopped.notebook(), back);
        String html = Files.readString(dir.resolve("small.html"), StandardCharsets.UTF_8);
        assertTrue(html.contains("<h1>Title</h1>"), html);
        assertTrue(html.contains("<em>prose</em>") && html.contains("<code>code</code>"));
        assertTrue(html.contains("src=\"data:image/png;base64,iVBOR"), "chart inline as PNG");
        assertTrue(html.contains("<table"));
        assertTrue(html.contains("boom 1"));
        assertEquals("Title", stopped.title());
    }

    @Test
    void rejectsFilesThatAreNotNotebooksNamingTheFile() throws Exception {
        Path dir = Fixtures.tempDir("runner-bad");
        Path notJson = dir.resolve("broken.ipynb");
        Files.writeString(notJson, "{\"cells\": [");
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                () -> NotebookRunner.create().execute(notJson));
        assertTrue(e.getMessage().contains("broken.ipynb") && e.getMessage().contains("invalid JSON"), e.getMessage());
        Path v3 = dir.resolve("old.ipynb");
        Files.writeString(v3, "{\"nbformat\": 3, \"worksheets\": []}");
        e = assertThrows(IllegalArgumentException.class, () -> NotebookRunner.create().execute(v3));
        assertTrue(e.getMessage().contains("old.ipynb") && e.getMessage().contains("nbformat is 3"), e.getMessage());
        Path noCells = dir.resolve("nocells.ipynb");
        Files.writeString(noCells, "{\"nbformat\": 4}");
        e = assertThrows(IllegalArgumentException.class, () -> NotebookRunner.create().execute(noCells));
        assertTrue(e.getMessage().contains("no \"cells\""), e.getMessage());
        assertFalse(NotebookRunner.create().continuesOnError());
    }
}
