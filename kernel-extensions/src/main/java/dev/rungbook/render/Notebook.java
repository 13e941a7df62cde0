package dev.rungbook.render;

import dev.rungbook.progress.Progress;
import java.nio.charset.StandardCharsets;
import java.util.UUID;

/**
 * Helpers for notebook cells, statically imported at kernel start: {@code display(x)}, {@code updateDisplay(id, x)},
 * {@code clearOutput()} and {@code progress()}.
 *
 * <p>Each cell's output sink is bound to the cell's thread and inherited by threads it starts, so output of
 * background work lands in the cell that started it (or is dropped with a notice once that cell has finished).
 * Outside a kernel (plain Java, tests, the command line) the helpers print text to {@code System.out}.
 */
public final class Notebook {
    private static final InheritableThreadLocal<OutputSink> SINK = new InheritableThreadLocal<>();
    private static final Renderers RENDERERS = Renderers.standard();

    private Notebook() {
    }

    /**
     * Shows {@code value} as a new output of the running cell, rendered like a cell's last expression.
     *
     * @return the display id, for {@link #updateDisplay(String, Object)}
     */
    public static String display(Object value) {
        String id = UUID.randomUUID().toString();
        MimeBundle bundle = value instanceof MimeBundle b ? b : RENDERERS.render(value);
        OutputSink sink = SINK.get();
        if (sink == null) {
            System.out.println(bundle.plainText());
        } else {
            sink.display(bundle, id);
        }
        return id;
    }

    /** Replaces the output shown by {@link #display(Object)} under {@code displayId} with {@code value}. */
    public static void updateDisplay(String displayId, Object value) {
        if (displayId == null || displayId.isBlank()) {
            throw new IllegalArgumentException("updateDisplay: display id is empty; use the id display(...) returned");
        }
        MimeBundle bundle = value instanceof MimeBundle b ? b : RENDERERS.render(value);
        OutputSink sink = SINK.get();
        if (sink == null) {
            System.out.println(bundle.plainText());
        } else {
            sink.update(displayId, bundle);
        }
    }

    /** Clears the running cell's output now. */
    public static void clearOutput() {
        clearOutput(false);
    }

    /**
     * Clears the running cell's output; with {@code wait} the front end clears only when the next output arrives,
     * which avoids flicker in loops that redraw.
     */
    public static void clearOutput(boolean wait) {
        OutputSink sink = SINK.get();
        if (sink != null) {
            sink.clear(wait);
        }
    }

    /**
     * A progress listener for library calls: a live progress bar in the notebook (throttled to a few updates a
     * second), or a silent one outside a kernel.
     */
    public static Progress progress() {
        OutputSink sink = SINK.get();
        return sink == null ? Progress.silent() : new NotebookProgress(sink, System::nanoTime);
    }

    /** The renderers used by the helpers and the kernel. */
    public static Renderers renderers() {
        return RENDERERS;
    }

    /**
     * The value rendered by {@link #renderers()}; if a renderer fails, plain text naming the value's class and the
     * failure instead (a broken renderer must not fail the cell).
     */
    public static MimeBundle renderSafely(Object value) {
        try {
            return RENDERERS.render(value);
        } catch (RuntimeException | LinkageError | OutOfMemoryError e) {
            return MimeBundle.text(value == null ? "null" : value.getClass().getName() + " (rendering failed: " + e
                    + ")");
        }
    }

    /**
     * Binds {@code sink} to the current thread (and threads it starts from now on); kernel use. Returns the
     * previous binding so that callers can restore it.
     */
    public static OutputSink bind(OutputSink sink) {
        OutputSink before = SINK.get();
        if (sink == null) {
            SINK.remove();
        } else {
            SINK.set(sink);
        }
        return before;
    }

    /** The sink bound to the current thread, or null; kernel use. */
    public static OutputSink current() {
        return SINK.get();
    }

    static void print(OutputSink sink, String text) {
        byte[] b = text.getBytes(StandardCharsets.UTF_8);
        sink.write(OutputSink.Stream.STDOUT, b, 0, b.length);
    }
}
