package dev.rungbook.kernel;

import dev.rungbook.render.MimeBundle;
import dev.rungbook.render.OutputSink;
import java.nio.ByteBuffer;
import java.nio.CharBuffer;
import java.nio.charset.CharsetDecoder;
import java.nio.charset.CodingErrorAction;
import java.nio.charset.StandardCharsets;

/**
 * The output of one running cell. Text written to stdout/stderr is batched: it is sent when the other stream is
 * written, when {@link #BATCH_CHARS} have gathered, or by {@link #flush()} (the kernel calls it every few tens of
 * milliseconds, so text without a newline shows promptly). A cell sends at most {@link #limitChars} characters; the
 * rest is counted and reported in one truncation notice at the end. After {@link #close()} everything written
 * (e.g. by background threads the cell started) is dropped and counted. Thread-safe.
 */
public final class CellOutput implements OutputSink {
    /** Text sent in one stream message at most (except for a single longer write). */
    public static final int BATCH_CHARS = 64 * 1024;
    /** Default cap of text a cell sends. */
    public static final long DEFAULT_LIMIT_CHARS = 32L * 1024 * 1024;

    /** Where the cell's messages go (the Jupyter layer implements it over the IOPub channel). */
    public interface Publisher {
        /** Sends {@code text} on stream {@code stdout} or {@code stderr}. */
        void stream(Stream stream, String text);

        /** Sends a display_data message. */
        void display(MimeBundle bundle, String displayId);

        /** Sends an update_display_data message. */
        void update(String displayId, MimeBundle bundle);

        /** Sends clear_output. */
        void clear(boolean wait);
    }

    private final Publisher publisher;
    private final long limitChars;
    private final StringBuilder pending = new StringBuilder();
    private Stream pendingStream;
    private final CharsetDecoder[] decoders = new CharsetDecoder[2];
    private final ByteBuffer[] leftovers = new ByteBuffer[2];
    private long sentChars;
    private long droppedChars;
    private long droppedAfterClose;
    private boolean closed;

    /** @param publisher where messages go; @param limitChars cap of text sent by this cell */
    public CellOutput(Publisher publisher, long limitChars) {
        this.publisher = publisher;
        this.limitChars = limitChars;
        for (int i = 0; i < 2; i++) {
            decoders[i] = StandardCharsets.UTF_8.newDecoder().onMalformedInput(CodingErrorAction.REPLACE)
                    .onUnmappableCharacter(CodingErrorAction.REPLACE);
            leftovers[i] = ByteBuffer.allocate(0);
        }
    }

    @Override
    public synchronized void write(Stream stream, byte[] bytes, int offset, int length) {
        if (closed) {
            droppedAfterClose += length;
            return;
        }
        append(stream, decode(stream, bytes, offset, length));
    }

    /** Appends text to a stream (same batching as {@link #write}). */
    public synchronized void append(Stream stream, String text) {
        if (text.isEmpty()) {
            return;
        }
        if (closed) {
            droppedAfterClose += text.length();
            return;
        }
        long room = limitChars - sentChars - pending.length();
        if (room <= 0) {
            droppedChars += text.length();
            return;
        }
        if (text.length() > room) {
            droppedChars += text.length() - room;
            text = text.substring(0, (int) room);
        }
        if (pendingStream != null && pendingStream != stream) {
            flushLocked();
        }
        pendingStream = stream;
        pending.append(text);
        if (pending.length() >= BATCH_CHARS) {
            flushLocked();
        }
    }

    private String decode(Stream stream, byte[] bytes, int offset, int length) {
        int i = stream.ordinal();
        ByteBuffer in;
        if (leftovers[i].hasRemaining()) {
            in = ByteBuffer.allocate(leftovers[i].remaining() + length);
            in.put(leftovers[i]).put(bytes, offset, length).flip();
        } else {
            in = ByteBuffer.wrap(bytes, offset, length);
        }
        CharBuffer out = CharBuffer.allocate(in.remaining() + 1);
        decoders[i].decode(in, out, false);
        // An incomplete UTF-8 sequence at the end waits for the next write.
        ByteBuffer rest = ByteBuffer.allocate(in.remaining());
        rest.put(in).flip();
        leftovers[i] = rest;
        out.flip();
        return out.toString();
    }

    /** Sends the gathered text now. */
    public synchronized void flush() {
        flushLocked();
    }

    private void flushLocked() {
        if (pending.length() == 0) {
            return;
        }
        String text = pending.toString();
        pending.setLength(0);
        sentChars += text.length();
        publisher.stream(pendingStream, text);
    }

    @Override
    public synchronized void display(MimeBundle bundle, String displayId) {
        if (closed) {
            droppedAfterClose++;
            return;
        }
        flushLocked();
        publisher.display(bundle, displayId);
    }

    @Override
    public synchronized void update(String displayId, MimeBundle bundle) {
        if (closed) {
            droppedAfterClose++;
            return;
        }
        flushLocked();
        publisher.update(displayId, bundle);
    }

    @Override
    public synchronized void clear(boolean wait) {
        if (closed) {
            return;
        }
        flushLocked();
        publisher.clear(wait);
    }

    /**
     * Sends what is pending and the truncation notice (if any); afterwards all output is dropped and counted.
     */
    public synchronized void close() {
        if (closed) {
            return;
        }
        flushLocked();
        if (droppedChars > 0) {
            publisher.stream(Stream.STDERR, String.format(java.util.Locale.ROOT,
                    "%n[rungbook: output truncated: this cell printed more than %,d characters; "
                            + "%,d further characters were not sent]%n", limitChars, droppedChars));
        }
        closed = true;
    }

    /** Characters (or displays) written after {@link #close()} and dropped. */
    public synchronized long droppedAfterClose() {
        return droppedAfterClose;
    }

    /** Characters not sent because of the cap. */
    public synchronized long truncatedChars() {
        return droppedChars;
    }
}
