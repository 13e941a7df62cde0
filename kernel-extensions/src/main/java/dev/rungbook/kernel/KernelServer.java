package dev.rungbook.kernel;

import java.io.IOException;
import java.nio.charset.StandardCharsets;
import java.nio.file.Files;
import java.nio.file.Path;
import java.security.GeneralSecurityException;
import java.util.Optional;
import java.util.logging.ConsoleHandler;
import java.util.logging.Handler;
import java.util.logging.Level;
import java.util.logging.Logger;
import java.util.logging.SimpleFormatter;
import org.dflib.jjava.jupyter.kernel.KernelConnectionProperties;

/** Starts the kernel for a Jupyter connection file and serves until the client shuts it down. */
public final class KernelServer {
    /** Environment variable: characters a cell may print before its output is truncated (default 32 Mi). */
    public static final String OUTPUT_LIMIT_ENV = "RUNGBOOK_OUTPUT_LIMIT";

    private KernelServer() {
    }

    /**
     * Serves the connection described by {@code connectionFile} until a shutdown request; returns the exit code.
     *
     * @throws IOException if the connection file cannot be read
     * @throws IllegalArgumentException if it is not a valid connection file
     */
    public static int serve(Path connectionFile) throws IOException {
        configureLogging();
        String json = Files.readString(connectionFile, StandardCharsets.UTF_8);
        KernelConnectionProperties props;
        try {
            props = KernelConnectionProperties.parse(json);
        } catch (RuntimeException e) {
            throw new IllegalArgumentException(connectionFile + ": not a Jupyter connection file (" + e.getMessage()
                    + ")", e);
        }
        if (props == null || props.getTransport() == null || props.getIp() == null) {
            throw new IllegalArgumentException(connectionFile + ": connection file lacks transport or ip");
        }
        String classPath = System.getProperty("java.class.path");
        Optional<String> userStartup;
        try {
            userStartup = StartupScript.userScript();
        } catch (IOException e) {
            Logger.getLogger(KernelServer.class.getName()).warning("cannot read start-up file "
                    + StartupScript.userFile() + ": " + e);
            userStartup = Optional.empty();
        }
        String startup = userStartup.orElse(null);
        RungbookKernel kernel = RungbookKernel.create(() -> CellEvaluator.create(classPath,
                StartupScript.imports(KernelServer.class.getClassLoader()), startup), outputLimit());
        GuardedConnection connection;
        try {
            connection = new GuardedConnection(props);
        } catch (GeneralSecurityException e) {
            throw new IllegalArgumentException(connectionFile + ": unusable signature scheme "
                    + props.getSignatureScheme() + " (" + e.getMessage() + ")", e);
        }
        exitWithParent();
        kernel.becomeHandlerForConnection(connection);
        kernel.onStopOnError(connection::abortQueuedExecuteRequests);
        connection.connect();
        kernel.startSession();
        connection.waitUntilClose();
        return 0;
    }

    /** Cells of the training run behind the kernel's class-data archive: what a first session typically does. */
    static final java.util.List<String> WARM_UP_CELLS = java.util.List.of(
            "1 + 1",
            "String s = \"warm\"; s.length()",
            "var t = Table.create(\"t\", DoubleColumn.create(\"x\", new double[] {1, 2, 3}));\nt",
            "var w = Tensor.of(new float[] {-1f, 0.5f, 2f, 0.25f}, 2, 2);\n"
                    + "var q = Quantizer.linear(8).apply(w);\nq.error()",
            "var c = new XYChartBuilder().width(600).height(400).build();\n"
                    + "c.addSeries(\"s\", new double[] {0, 1}, new double[] {1, 0});\nc");

    /**
     * Evaluates {@link #WARM_UP_CELLS} in a fresh session and renders their values, then returns: the training run
     * for the class-data archive ({@code rungbook kernel warm-up}). Fails if a cell fails, so that a broken archive run
     * is noticed.
     *
     * @return the number of cells run
     */
    public static int warmUp() {
        CellEvaluator ev = CellEvaluator.create(System.getProperty("java.class.path"),
                StartupScript.imports(KernelServer.class.getClassLoader()), null);
        int n = 0;
        for (String cell : WARM_UP_CELLS) {
            CellResult r = ev.eval(cell, ++n);
            if (!(r instanceof CellResult.Success s)) {
                throw new IllegalStateException("warm-up cell " + n + " failed: " + r);
            }
            dev.rungbook.render.Notebook.renderers().render(s.value().orElse(null));
        }
        return n;
    }

    /**
     * Ends the kernel when the process that started it ({@code $JPY_PARENT_PID}, set by Jupyter's kernel manager)
     * has gone, so that a crashed client leaves no orphan kernel behind.
     */
    private static void exitWithParent() {
        String pid = System.getenv("JPY_PARENT_PID");
        if (pid == null || pid.isBlank()) {
            return;
        }
        try {
            ProcessHandle.of(Long.parseLong(pid.strip())).ifPresent(parent -> parent.onExit().thenRun(() -> {
                Logger.getLogger(KernelServer.class.getName()).warning("parent process " + pid
                        + " has ended; the kernel exits");
                System.exit(0);
            }));
        } catch (NumberFormatException e) {
            Logger.getLogger(KernelServer.class.getName()).warning("JPY_PARENT_PID=" + pid + " is not a process id");
        }
    }

    private static long outputLimit() {
        String v = System.getenv(OUTPUT_LIMIT_ENV);
        if (v == null || v.isBlank()) {
            return CellOutput.DEFAULT_LIMIT_CHARS;
        }
        try {
            return Math.max(1, Long.parseLong(v.strip()));
        } catch (NumberFormatException e) {
            throw new IllegalArgumentException(OUTPUT_LIMIT_ENV + "=" + v + " is not a number of characters", e);
        }
    }

    private static void configureLogging() {
        Logger root = Logger.getLogger("");
        for (Handler h : root.getHandlers()) {
            root.removeHandler(h);
        }
        ConsoleHandler h = new ConsoleHandler();
        System.setProperty("java.util.logging.SimpleFormatter.format", "[rungbook %4$s] %5$s%6$s%n");
        h.setFormatter(new SimpleFormatter());
        h.setLevel(Level.INFO);
        root.addHandler(h);
        root.setLevel(Level.INFO);
        Logger.getLogger("org.dflib").setLevel(Level.WARNING);
    }
}
