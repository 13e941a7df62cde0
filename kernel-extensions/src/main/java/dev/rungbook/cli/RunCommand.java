package dev.rungbook.cli;

import dev.rungbook.runner.ExecutedNotebook;
import dev.rungbook.runner.NotebookRunner;
import java.io.PrintStream;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.List;
import java.util.concurrent.Callable;
import picocli.CommandLine.Command;
import picocli.CommandLine.Option;
import picocli.CommandLine.Parameters;

/** {@code rungbook run NOTEBOOK...}: executes notebooks headless with the embedded runner. */
@Command(name = "run", mixinStandardHelpOptions = true,
        description = {"Execute notebooks headless (no Jupyter needed) with the same JShell evaluator as the kernel.",
            "Relative paths in cells resolve against the current directory: run from the repository root."})
final class RunCommand implements Callable<Integer> {
    @Parameters(arity = "1..*", paramLabel = "NOTEBOOK", description = "Notebooks (.ipynb, nbformat 4) to execute.")
    List<Path> notebooks;

    @Option(names = "--out", paramLabel = "DIR",
            description = "Folder for the executed notebooks and reports (default: ${DEFAULT-VALUE}).",
            defaultValue = "target/notebooks")
    Path out;

    @Option(names = "--html", description = "Also write a self-contained HTML report per notebook.")
    boolean html;

    @Option(names = "--in-place", description = "Write the executed notebook over its source file.")
    boolean inPlace;

    @Option(names = "--continue-on-error", description = "Run the remaining cells after a failing cell.")
    boolean continueOnError;

    @Override
    public Integer call() throws Exception {
        return run(notebooks, inPlace ? null : out, html, continueOnError, System.out, System.err);
    }

    /**
     * Executes each notebook; writes it to {@code outDir} (or over its source when {@code outDir} is null) and,
     * with {@code html}, its report beside it. Returns 0 when no cell failed, else 1.
     */
    static int run(List<Path> notebooks, Path outDir, boolean html, boolean continueOnError, PrintStream out,
            PrintStream err) throws Exception {
        NotebookRunner runner = NotebookRunner.create().continueOnError(continueOnError);
        return run(notebooks, outDir, html, runner::execute, out, err);
    }

    /** Executes one notebook file. */
    interface Executor {
        ExecutedNotebook execute(Path notebook) throws java.io.IOException;
    }

    /** As {@link #run(List, Path, boolean, boolean, PrintStream, PrintStream)}, executing with {@code runner}. */
    static int run(List<Path> notebooks, Path outDir, boolean html, Executor runner, PrintStream out,
            PrintStream err) throws Exception {
        int failed = 0;
        for (Path nb : notebooks) {
            if (!Files.isRegularFile(nb)) {
                err.println("rungbook run: no notebook at " + nb.toAbsolutePath());
                failed++;
                continue;
            }
            ExecutedNotebook done;
            try {
                done = runner.execute(nb);
            } catch (IllegalArgumentException e) {
                err.println("rungbook run: " + e.getMessage());
                failed++;
                continue;
            }
            Path target = outDir == null ? nb : outDir.resolve(nb.getFileName());
            done.write(target);
            String name = nb.getFileName().toString();
            String base = name.endsWith(".ipynb") ? name.substring(0, name.length() - 6) : name;
            Path report = target.resolveSibling(base + ".html");
            if (html) {
                done.writeHtml(report);
            }
            out.printf("%s: %d of %d code cells ran, %d failed -> %s%s%n", nb, done.executedCells(), done.codeCells(),
                    done.errors().size(), target, html ? ", " + report : "");
            for (ExecutedNotebook.CellError e : done.errors()) {
                err.printf("  cell [%d] (cell %d of the file): %s: %s%n", e.executionCount(), e.cellIndex() + 1,
                        e.ename(), e.evalue());
            }
            if (done.hasErrors()) {
                failed++;
            }
        }
        return failed == 0 ? 0 : 1;
    }
}
