package dev.rungbook.runner;

import com.google.gson.JsonObject;
import java.io.IOException;
import java.nio.file.Path;
import java.util.List;

/**
 * A notebook after {@link NotebookRunner#execute(Path)}: the notebook with outputs and execution counts, and the
 * cells that failed.
 *
 * @param source the notebook file it was read from
 * @param notebook the executed notebook (nbformat 4 JSON); do not modify
 * @param codeCells number of code cells
 * @param executedCells number of code cells that ran (fewer than {@code codeCells} when a failure stopped the run)
 * @param errors the failing cells, in order
 */
public record ExecutedNotebook(Path source, JsonObject notebook, int codeCells, int executedCells,
        List<CellError> errors) {
    /**
     * One failing cell.
     *
     * @param cellIndex 0-based index among all cells of the notebook
     * @param executionCount the cell's execution count
     * @param ename the error name (exception class, or {@code CompileError})
     * @param evalue the error message
     */
    public record CellError(int cellIndex, int executionCount, String ename, String evalue) {
    }

    /** @param errors the failing cells (copied) */
    public ExecutedNotebook {
        errors = List.copyOf(errors);
    }

    /** Whether any cell failed. */
    public boolean hasErrors() {
        return !errors.isEmpty();
    }

    /** The executed notebook as nbformat 4 JSON text (indented, like Jupyter writes it). */
    public String toJson() {
        return Json.PRETTY.toJson(notebook) + "\n";
    }

    /** Writes the executed notebook to {@code file} atomically (temporary file in the same folder, then rename). */
    public void write(Path file) throws IOException {
        Json.writeAtomically(file, toJson());
    }

    /** Writes the self-contained HTML report to {@code file} atomically. */
    public void writeHtml(Path file) throws IOException {
        Json.writeAtomically(file, HtmlReport.render(notebook, title()));
    }

    /** The report title: the notebook's first level-1 heading, else its file name. */
    public String title() {
        String heading = HtmlReport.firstHeading(notebook);
        return heading != null ? heading : String.valueOf(source.getFileName());
    }
}
