package dev.rungbook.cli;

import dev.rungbook.progress.Progress;

/**
 * Shows one task of a long operation on a terminal bar under another name, ignoring the finer-grained tasks the
 * library reports inside it (each quantizer's segments), so the bar counts tensors instead of flickering.
 */
final class OneTaskProgress implements Progress {
    private final Progress bar;
    private final String task;
    private final String shown;

    OneTaskProgress(Progress bar, String task, String shown) {
        this.bar = bar;
        this.task = task;
        this.shown = shown;
    }

    @Override
    public void update(String t, long done, long total, double loss) {
        if (t.equals(task)) {
            bar.update(shown, done, total, Double.NaN);
        }
    }

    @Override
    public void finish(String t) {
        if (t.equals(task)) {
            bar.finish(shown);
        }
    }
}
