package dev.rungbook.render;

import dev.rungbook.progress.Progress;
import java.util.Locale;
import java.util.Map;
import java.util.UUID;
import java.util.concurrent.ConcurrentHashMap;
import java.util.function.LongSupplier;

/**
 * A {@link Progress} shown as a live HTML progress bar per task, updated in place ({@code update_display_data}) at
 * most {@link #MAX_UPDATES_PER_SECOND} times a second: share done, steps, rate, time left and the current loss.
 * Thread-safe; library work may report from several threads.
 */
public final class NotebookProgress implements Progress {
    /** Upper bound of redraws per task and second (the first and the final report are always drawn). */
    public static final int MAX_UPDATES_PER_SECOND = 4;
    private static final long MIN_GAP_NANOS = 1_000_000_000L / MAX_UPDATES_PER_SECOND;

    private final OutputSink sink;
    private final LongSupplier clock;
    private final Map<String, Bar> bars = new ConcurrentHashMap<>();

    private static final class Bar {
        final String displayId = UUID.randomUUID().toString();
        final long started;
        long lastDrawn = Long.MIN_VALUE;
        long done;
        long total;
        double loss = Double.NaN;

        Bar(long started) {
            this.started = started;
        }
    }

    /**
     * @param sink the cell output the bars are drawn in
     * @param clock nanosecond clock (e.g. {@code System::nanoTime})
     */
    public NotebookProgress(OutputSink sink, LongSupplier clock) {
        this.sink = sink;
        this.clock = clock;
    }

    @Override
    public void update(String task, long done, long total, double loss) {
        long now = clock.getAsLong();
        Bar bar = bars.computeIfAbsent(task, t -> new Bar(now));
        boolean first;
        synchronized (bar) {
            bar.done = done;
            bar.total = total;
            if (!Double.isNaN(loss)) {
                bar.loss = loss;
            }
            first = bar.lastDrawn == Long.MIN_VALUE;
            boolean last = total > 0 && done >= total;
            if (!first && !last && now - bar.lastDrawn < MIN_GAP_NANOS) {
                return;
            }
            bar.lastDrawn = now;
        }
        draw(task, bar, now, first, false);
    }

    @Override
    public void finish(String task) {
        Bar bar = bars.remove(task);
        if (bar != null) {
            draw(task, bar, clock.getAsLong(), false, true);
        }
    }

    private void draw(String task, Bar bar, long now, boolean first, boolean finished) {
        MimeBundle view;
        synchronized (bar) {
            view = view(task, bar.done, bar.total, bar.loss, (now - bar.started) / 1e9, finished);
        }
        if (first) {
            sink.display(view, bar.displayId);
        } else {
            sink.update(bar.displayId, view);
        }
    }

    /** The bar for one report: {@code elapsed} seconds since the task's first report. */
    static MimeBundle view(String task, long done, long total, double loss, double elapsed, boolean finished) {
        StringBuilder facts = new StringBuilder();
        double share = total > 0 ? Math.min(1.0, (double) done / total) : Double.NaN;
        if (!Double.isNaN(share)) {
            facts.append(String.format(Locale.ROOT, "%3.0f%% · %,d/%,d", share * 100, done, total));
        } else {
            facts.append(String.format(Locale.ROOT, "%,d steps", done));
        }
        double rate = elapsed > 0 ? done / elapsed : Double.NaN;
        if (!Double.isNaN(rate) && done > 0) {
            facts.append(" · ").append(TableRenderer.number(rate)).append("/s");
            if (!finished && total > 0 && done < total) {
                facts.append(" · ").append(duration((total - done) / rate)).append(" left");
            }
        }
        if (finished) {
            facts.append(" · done in ").append(duration(elapsed));
        }
        if (!Double.isNaN(loss)) {
            facts.append(" · loss ").append(TableRenderer.number(loss));
        }
        String bar = total > 0
                ? "<progress value=\"" + Math.min(done, total) + "\" max=\"" + total + "\" style=\"width:16em\"></progress>"
                : "<progress style=\"width:16em\"></progress>";
        String html = "<div class=\"rungbook-progress\" style=\"font-size:12px\"><b>" + TableRenderer.escape(task)
                + "</b> " + bar + " <span style=\"font-variant-numeric:tabular-nums\">"
                + TableRenderer.escape(facts.toString()) + "</span></div>";
        String text = task + " " + textBar(share) + " " + facts;
        return MimeBundle.html(html, text);
    }

    private static String textBar(double share) {
        if (Double.isNaN(share)) {
            return "[" + "?".repeat(20) + "]";
        }
        int filled = (int) Math.round(share * 20);
        return "[" + "#".repeat(filled) + ".".repeat(20 - filled) + "]";
    }

    /** A duration such as {@code 45s}, {@code 3m 05s}, {@code 2h 10m}. */
    static String duration(double seconds) {
        if (Double.isNaN(seconds) || Double.isInfinite(seconds)) {
            return "?";
        }
        long s = Math.round(seconds);
        if (s < 60) {
            return s + "s";
        }
        if (s < 3600) {
            return String.format(Locale.ROOT, "%dm %02ds", s / 60, s % 60);
        }
        return String.format(Locale.ROOT, "%dh %02dm", s / 3600, (s % 3600) / 60);
    }
}
