package dev.rungbook.runner;

import com.google.gson.JsonArray;
import com.google.gson.JsonElement;
import com.google.gson.JsonNull;
import com.google.gson.JsonObject;
import com.google.gson.JsonParseException;
import com.google.gson.JsonParser;
import dev.rungbook.kernel.CellOutput;
import dev.rungbook.kernel.CellResult;
import dev.rungbook.kernel.CellSession;
import dev.rungbook.render.Notebook;
import dev.rungbook.render.OutputSink;
import java.io.IOException;
import java.nio.charset.StandardCharsets;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.ArrayList;
import java.util.List;

/**
 * Executes a Jupyter notebook (nbformat 4) headless, without Jupyter: its code cells run in order in a fresh
 * JShell session through the same evaluator, output routing and renderers as the Rungbook kernel, and their outputs
 * are recorded as nbformat outputs ({@code stream}, {@code display_data}, {@code execute_result}, {@code error}).
 *
 * <p>Cells run in this JVM, so relative paths in cells resolve against the JVM's working directory (the repository
 * root for {@code ./rungbook run} and {@code ./rungbook demo}). The user's start-up file is not evaluated, so that
 * a headless run does not depend on personal settings. Not thread-safe; one notebook at a time.
 */
public final class NotebookRunner {
    private final String classPath;
    private final boolean continueOnError;
    private final long outputLimit;

    private NotebookRunner(String classPath, boolean continueOnError, long outputLimit) {
        this.classPath = classPath;
        this.continueOnError = continueOnError;
        this.outputLimit = outputLimit;
    }

    /** A runner whose cells see this JVM's class path and which stops at the first failing cell. */
    public static NotebookRunner create() {
        return new NotebookRunner(System.getProperty("java.class.path"), false, CellOutput.DEFAULT_LIMIT_CHARS);
    }

    /** This runner, but running the remaining cells after a failing one ({@code true}) or stopping ({@code false}). */
    public NotebookRunner continueOnError(boolean yes) {
        return new NotebookRunner(classPath, yes, outputLimit);
    }

    /** Whether cells after a failing cell are run. */
    public boolean continuesOnError() {
        return continueOnError;
    }

    /**
     * Reads and executes {@code notebook}.
     *
     * @throws IOException when the file cannot be read
     * @throws IllegalArgumentException when the file is not an nbformat 4 notebook (the message names the file)
     */
    public ExecutedNotebook execute(Path notebook) throws IOException {
        JsonObject nb = read(notebook);
        return execute(notebook, nb);
    }

    /** Executes an already parsed notebook; {@code source} names it in messages and reports. */
    public ExecutedNotebook execute(Path source, JsonObject notebook) {
        JsonObject nb = notebook.deepCopy();
        JsonArray cells = cells(source, nb);
        List<ExecutedNotebook.CellError> errors = new ArrayList<>();
        int codeCells = 0;
        int executed = 0;
        boolean stopped = false;
        try (CellSession session = CellSession.start(classPath, null)) {
            List<String> startupProblems = session.startupProblems();
            for (int i = 0; i < cells.size(); i++) {
                JsonObject cell = cells.get(i).getAsJsonObject();
                if (!"code".equals(cell.has("cell_type") ? cell.get("cell_type").getAsString() : "")) {
                    continue;
                }
                codeCells++;
                if (stopped) {
                    cell.add("execution_count", JsonNull.INSTANCE);
                    cell.add("outputs", new JsonArray());
                    continue;
                }
                int count = ++executed;
                RecordingSink record = new RecordingSink();
                CellOutput output = new CellOutput(record, outputLimit);
                if (count == 1) {
                    for (String p : startupProblems) {
                        output.append(OutputSink.Stream.STDERR, "[rungbook: " + p + "]\n");
                    }
                }
                CellResult result;
                try {
                    result = session.run(Json.text(cell.get("source")), count, output);
                } finally {
                    output.close();
                }
                if (result instanceof CellResult.Success s) {
                    if (s.hasValue()) {
                        record.result(Notebook.renderSafely(s.value().orElse(null)), count);
                    }
                } else {
                    CellSession.Failure f = CellSession.Failure.of(result);
                    record.error(f.ename(), f.evalue(), f.traceback());
                    errors.add(new ExecutedNotebook.CellError(i, count, f.ename(), f.evalue()));
                    stopped = !continueOnError;
                }
                cell.addProperty("execution_count", count);
                cell.add("outputs", record.outputs());
            }
        }
        return new ExecutedNotebook(source, nb, codeCells, executed, errors);
    }

    /**
     * Parses an nbformat 4 notebook.
     *
     * @throws IllegalArgumentException naming the file when it is not JSON or not nbformat 4 with a cell list
     */
    public static JsonObject read(Path notebook) throws IOException {
        String text = Files.readString(notebook, StandardCharsets.UTF_8);
        JsonElement e;
        try {
            e = JsonParser.parseString(text);
        } catch (JsonParseException ex) {
            throw new IllegalArgumentException(notebook + ": not a notebook (invalid JSON: " + ex.getMessage() + ")",
                    ex);
        }
        if (!e.isJsonObject()) {
            throw new IllegalArgumentException(notebook + ": not a notebook (top level is not a JSON object)");
        }
        JsonObject nb = e.getAsJsonObject();
        JsonElement format = nb.get("nbformat");
        if (format == null || !format.isJsonPrimitive() || !format.getAsJsonPrimitive().isNumber()
                || format.getAsInt() != 4) {
            throw new IllegalArgumentException(notebook + ": nbformat is " + format + ", only nbformat 4 is supported");
        }
        cells(notebook, nb);
        return nb;
    }

    private static JsonArray cells(Path source, JsonObject nb) {
        JsonElement cells = nb.get("cells");
        if (cells == null || !cells.isJsonArray()) {
            throw new IllegalArgumentException(source + ": notebook has no \"cells\" list");
        }
        for (int i = 0; i < cells.getAsJsonArray().size(); i++) {
            if (!cells.getAsJsonArray().get(i).isJsonObject()) {
                throw new IllegalArgumentException(source + ": cell " + i + " is not a JSON object");
            }
        }
        return cells.getAsJsonArray();
    }
}
