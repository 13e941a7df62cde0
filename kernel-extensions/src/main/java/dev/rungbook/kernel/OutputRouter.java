package dev.rungbook.kernel;

import dev.rungbook.render.Notebook;
import dev.rungbook.render.OutputSink;
import java.io.OutputStream;
import java.io.PrintStream;
import java.nio.charset.StandardCharsets;

/**
 * Replacement for {@code System.out} / {@code System.err}: bytes written by a thread that belongs to a cell (the
 * cell's own thread and the threads it started) go to that cell's {@link OutputSink}; other writes go to the
 * original stream (the kernel's log).
 */
final class OutputRouter extends OutputStream {
    private static boolean installed;
    private final OutputSink.Stream stream;
    private final PrintStream fallback;

    private OutputRouter(OutputSink.Stream stream, PrintStream fallback) {
        this.stream = stream;
        this.fallback = fallback;
    }

    /** Installs routers as {@code System.out} and {@code System.err} (once per JVM). */
    static synchronized void install() {
        if (installed) {
            return;
        }
        installed = true;
        PrintStream out = System.out;
        PrintStream err = System.err;
        System.setOut(new PrintStream(new OutputRouter(OutputSink.Stream.STDOUT, out), true, StandardCharsets.UTF_8));
        System.setErr(new PrintStream(new OutputRouter(OutputSink.Stream.STDERR, err), true, StandardCharsets.UTF_8));
    }

    @Override
    public void write(int b) {
        write(new byte[] {(byte) b}, 0, 1);
    }

    @Override
    public void write(byte[] b, int off, int len) {
        OutputSink sink = Notebook.current();
        if (sink != null) {
            sink.write(stream, b, off, len);
        } else {
            fallback.write(b, off, len);
        }
    }

    @Override
    public void flush() {
        if (Notebook.current() == null) {
            fallback.flush();
        }
    }
}
