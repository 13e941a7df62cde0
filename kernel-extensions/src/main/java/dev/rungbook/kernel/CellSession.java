package dev.rungbook.kernel;

import dev.rungbook.render.OutputSink;
import java.util.ArrayList;
import java.util.List;
import java.util.concurrent.Executors;
import java.util.concurrent.ScheduledExecutorService;

/**
 * The kernel's cell machinery without the Jupyter protocol: one JShell session ({@link CellEvaluator}) run on the
 * kernel's cell thread ({@link CellRunner}) with {@code System.out}/{@code System.err} routed to the running cell's
 * {@link OutputSink}. The headless notebook runner uses it so that a notebook evaluates exactly as in the kernel.
 *
 * <p>Cells run in this JVM, so relative paths in cells resolve against this JVM's working directory.
 */
public final class CellSession implements AutoCloseable {
    private final CellRunner runner;
    private final ScheduledExecutorService timer;

    private CellSession(CellRunner runner, ScheduledExecutorService timer) {
        this.runner = runner;
        this.timer = timer;
    }

    /**
     * A session whose compiler sees {@code classPath}, with the kernel's start-up imports and, when not null, the
     * user's start-up snippets.
     */
    public static CellSession start(String classPath, String userStartup) {
        ScheduledExecutorService timer = Executors.newSingleThreadScheduledExecutor(r -> {
            Thread t = new Thread(r, "rungbook-session-timer");
            t.setDaemon(true);
            return t;
        });
        OutputRouter.install();
        CellRunner runner = new CellRunner(() -> CellEvaluator.create(classPath,
                StartupScript.imports(CellSession.class.getClassLoader()), userStartup), timer);
        runner.start();
        return new CellSession(runner, timer);
    }

    /** Problems met while evaluating the start-up imports and file (waits for the session to start). */
    public List<String> startupProblems() {
        return runner.evaluator().startupProblems();
    }

    /** Runs one cell with its output going to {@code sink}; waits for it to end. */
    public CellResult run(String code, int executionCount, OutputSink sink) {
        return runner.run(code, executionCount, sink);
    }

    /** The traceback lines the kernel shows for a compile failure: position, source line and a caret. */
    public static List<String> compileTraceback(CellResult.CompileFailure c) {
        List<String> lines = new ArrayList<>();
        for (CellResult.Problem p : c.problems()) {
            lines.add("line " + p.line() + ", column " + p.column() + ": " + p.message());
            lines.add("    " + p.sourceLine());
            lines.add("    " + " ".repeat(Math.max(0, p.column() - 1)) + "^");
        }
        return lines;
    }

    /** What a failed cell shows: the Jupyter error's name, value and traceback. */
    public record Failure(String ename, String evalue, List<String> traceback) {
        /** The error parts of a compile or runtime failure. */
        public static Failure of(CellResult failure) {
            if (failure instanceof CellResult.CompileFailure c) {
                return new Failure("CompileError", c.problems().isEmpty() ? "" : c.problems().get(0).message(),
                        compileTraceback(c));
            }
            CellResult.RuntimeFailure f = (CellResult.RuntimeFailure) failure;
            return new Failure(f.errorName(), f.message(), f.traceback());
        }
    }

    @Override
    public void close() {
        runner.close();
        timer.shutdownNow();
    }
}
