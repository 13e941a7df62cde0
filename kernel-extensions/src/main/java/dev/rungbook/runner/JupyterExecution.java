package dev.rungbook.runner;

import com.google.gson.JsonArray;
import com.google.gson.JsonElement;
import com.google.gson.JsonObject;
import java.io.IOException;
import java.nio.charset.StandardCharsets;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.ArrayList;
import java.util.List;
import java.util.Optional;
import java.util.concurrent.TimeUnit;

/**
 * Executes notebooks through real Jupyter: Python's {@code nbclient} starting the installed {@code rungbook} kernel,
 * as {@code jupyter nbconvert --execute} would. The result has the same form as the embedded
 * {@link NotebookRunner}'s, so the same reports and checks apply.
 */
public final class JupyterExecution {
    /** Pythons tried, in order, for one that has nbclient and nbformat. */
    public static final List<String> PYTHONS = List.of("python3", "/usr/bin/python3");
    private static final String SCRIPT = String.join("\n",
            "import sys, nbformat, nbclient",
            "source, target, workdir, timeout = sys.argv[1], sys.argv[2], sys.argv[3], int(sys.argv[4])",
            "nb = nbformat.read(source, as_version=4)",
            "client = nbclient.NotebookClient(nb, kernel_name='rungbook', timeout=timeout, startup_timeout=120,",
            "    allow_errors=False, resources={'metadata': {'path': workdir}})",
            "try:",
            "    client.execute()",
            "except nbclient.exceptions.CellExecutionError as e:",
            "    print('rungbook: a cell failed:', str(e).splitlines()[-1] if str(e) else e, file=sys.stderr)",
            "nbformat.write(nb, target)");

    private final String python;
    private final Path jupyterPath;
    private final long cellTimeoutSeconds;

    private JupyterExecution(String python, Path jupyterPath, long cellTimeoutSeconds) {
        this.python = python;
        this.jupyterPath = jupyterPath;
        this.cellTimeoutSeconds = cellTimeoutSeconds;
    }

    /**
     * Jupyter execution with the first Python of {@link #PYTHONS} that imports nbclient and nbformat, or empty when
     * there is none.
     *
     * @param jupyterPath a folder holding {@code kernels/rungbook} to put on {@code JUPYTER_PATH}, or null to use the
     *     kernels Jupyter finds by itself
     */
    public static Optional<JupyterExecution> find(Path jupyterPath) {
        for (String p : PYTHONS) {
            if (works(p)) {
                return Optional.of(new JupyterExecution(p, jupyterPath, 600));
            }
        }
        return Optional.empty();
    }

    private static boolean works(String python) {
        try {
            Process p = new ProcessBuilder(python, "-c", "import nbclient, nbformat").redirectErrorStream(true).start();
            p.getInputStream().readAllBytes();
            return p.waitFor(60, TimeUnit.SECONDS) && p.exitValue() == 0;
        } catch (IOException e) {
            return false;
        } catch (InterruptedException e) {
            Thread.currentThread().interrupt();
            return false;
        }
    }

    /** The Python that runs nbclient. */
    public String python() {
        return python;
    }

    /**
     * Executes {@code notebook} on the {@code rungbook} kernel with {@code workDir} as the kernel's working folder,
     * stopping at the first failing cell as the embedded runner does.
     *
     * @throws IOException when nbclient cannot run or the kernel does not start (the message has nbclient's output)
     */
    public ExecutedNotebook execute(Path notebook, Path workDir) throws IOException {
        Path target = Files.createTempFile("rungbook-executed", ".ipynb");
        try {
            ProcessBuilder pb = new ProcessBuilder(python, "-c", SCRIPT, notebook.toAbsolutePath().toString(),
                    target.toString(), workDir.toAbsolutePath().toString(), Long.toString(cellTimeoutSeconds))
                    .redirectErrorStream(true);
            if (jupyterPath != null) {
                pb.environment().put("JUPYTER_PATH", jupyterPath.toAbsolutePath().toString());
            }
            Process p = pb.start();
            byte[] log = p.getInputStream().readAllBytes();
            boolean ended = p.waitFor(cellTimeoutSeconds * 4, TimeUnit.SECONDS);
            if (!ended) {
                p.destroyForcibly();
            }
            if (!ended || p.exitValue() != 0 || Files.size(target) == 0) {
                throw new IOException(notebook + ": Jupyter execution failed"
                        + (ended ? " (exit " + p.exitValue() + ")" : " (timed out)") + ": "
                        + tail(new String(log, StandardCharsets.UTF_8)));
            }
            return summarize(notebook, NotebookRunner.read(target));
        } catch (InterruptedException e) {
            Thread.currentThread().interrupt();
            throw new IOException(notebook + ": interrupted while Jupyter executed it", e);
        } finally {
            Files.deleteIfExists(target);
        }
    }

    /** Counts the code cells, the executed ones and the error outputs of an executed notebook. */
    static ExecutedNotebook summarize(Path source, JsonObject nb) {
        JsonArray cells = nb.getAsJsonArray("cells");
        int code = 0;
        int executed = 0;
        List<ExecutedNotebook.CellError> errors = new ArrayList<>();
        for (int i = 0; i < cells.size(); i++) {
            JsonObject cell = cells.get(i).getAsJsonObject();
            if (!cell.has("cell_type") || !"code".equals(cell.get("cell_type").getAsString())) {
                continue;
            }
            code++;
            JsonElement count = cell.get("execution_count");
            if (count == null || count.isJsonNull()) {
                continue;
            }
            executed++;
            JsonArray outputs = cell.has("outputs") ? cell.getAsJsonArray("outputs") : new JsonArray();
            for (JsonElement o : outputs) {
                JsonObject out = o.getAsJsonObject();
                if ("error".equals(out.get("output_type").getAsString())) {
                    errors.add(new ExecutedNotebook.CellError(i, count.getAsInt(), Json.text(out.get("ename")),
                            Json.text(out.get("evalue"))));
                }
            }
        }
        return new ExecutedNotebook(source, nb, code, executed, errors);
    }

    private static String tail(String log) {
        String s = log.strip();
        return s.length() <= 2000 ? s : "..." + s.substring(s.length() - 2000);
    }
}
