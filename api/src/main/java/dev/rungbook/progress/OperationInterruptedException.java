package dev.rungbook.progress;

/** Thrown by long-running library work that stopped because its thread was interrupted. */
public class OperationInterruptedException extends RuntimeException {
    private static final long serialVersionUID = 1L;

    /** @param task what was running */
    public OperationInterruptedException(String task) {
        super(task + ": interrupted");
    }
}
