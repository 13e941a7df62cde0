package dev.rungbook.progress;

/**
 * Receives reports from long-running library work (codebook fitting, range searches, learned rounding, studies,
 * training). The kernel shows them as a live progress bar, the command line as a terminal bar; tests and batch jobs
 * use {@link #silent()}.
 *
 * <p>Implementations must be cheap and thread-safe; the library may report often, and throttling is the listener's
 * job. Work that reports progress also checks {@link Thread#interrupted()} at least once per step and stops with an
 * {@link OperationInterruptedException} when asked.
 */
public interface Progress {
    /**
     * A step of a task is done.
     *
     * @param task what is running, e.g. {@code "adaptive rounding fc1.weight"}
     * @param done steps done so far
     * @param total steps in all, or -1 when unknown
     * @param loss the current loss or error where there is one, else {@link Double#NaN}
     */
    void update(String task, long done, long total, double loss);

    /** The task finished (normally or not). */
    default void finish(String task) {
    }

    /** A listener that ignores everything. */
    static Progress silent() {
        return (task, done, total, loss) -> { };
    }

    /**
     * Throws {@link OperationInterruptedException} if the current thread has been interrupted (clearing the flag is
     * left to the exception's catcher). Long loops call this once per step.
     */
    static void checkInterrupted(String task) {
        if (Thread.currentThread().isInterrupted()) {
            throw new OperationInterruptedException(task);
        }
    }
}
