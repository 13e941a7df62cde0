package dev.rungbook.render;

/**
 * Where the output of the running notebook cell goes: its stdout/stderr text and its rich displays. The kernel
 * provides one per cell; headless code has none (see {@link Notebook}).
 */
public interface OutputSink {
    /** Standard output and error. */
    enum Stream {
        STDOUT, STDERR
    }

    /** Appends bytes (UTF-8) to a stream of the cell; may be batched. */
    void write(Stream stream, byte[] bytes, int offset, int length);

    /** Shows a new output; a non-null {@code displayId} lets it be updated later. */
    void display(MimeBundle bundle, String displayId);

    /** Replaces every output shown with {@code displayId}. */
    void update(String displayId, MimeBundle bundle);

    /** Clears the cell's output ({@code wait}: only when the next output arrives, which avoids flicker). */
    void clear(boolean wait);
}
