package dev.rungbook.cli;

import dev.rungbook.progress.Progress;
import java.io.PrintStream;
import java.util.Locale;

/** A one-line terminal progress bar, redrawn at most five times a second. */
final class TerminalProgress implements Progress {
    private static final long MIN_INTERVAL_NANOS = 200_000_000L;
    private final PrintStream out;
    private final boolean interactive;
    private long lastDraw;
    private long started = -1;

    private TerminalProgress(PrintStream out, boolean interactive) {
        this.out = out;
        this.interactive = interactive;
    }

    /** A bar on standard error; without a console it prints a plain line every few seconds instead. */
    static TerminalProgress toStderr() {
        return new TerminalProgress(System.err, System.console() != null);
    }

    @Override
    public synchronized void update(String task, long done, long total, double loss) {
        long now = System.nanoTime();
        if (started < 0) {
            started = now;
        }
        long interval = interactive ? MIN_INTERVAL_NANOS : 20 * MIN_INTERVAL_NANOS;
        if (now - lastDraw < interval && done != total) {
            return;
        }
        lastDraw = now;
        StringBuilder line = new StringBuilder(task).append(' ');
        if (total > 0) {
            double share = Math.min(1.0, done / (double) total);
            int width = 30;
            int filled = (int) Math.round(share * width);
            line.append('[').append("#".repeat(filled)).append(".".repeat(width - filled)).append("] ")
                    .append(String.format(Locale.ROOT, "%3.0f%%", 100 * share));
            double elapsed = (now - started) / 1e9;
            if (share > 0 && share < 1) {
                line.append(String.format(Locale.ROOT, " %.0fs left", elapsed * (1 - share) / share));
            }
        } else {
            line.append(done);
        }
        if (!Double.isNaN(loss)) {
            line.append(String.format(Locale.ROOT, " loss %.4g", loss));
        }
        out.print(interactive ? "\r" + line + "   " : line + System.lineSeparator());
        out.flush();
    }

    @Override
    public synchronized void finish(String task) {
        if (interactive) {
            out.println();
        }
        started = -1;
    }
}
