package dev.rungbook.kernel;

import java.util.List;
import java.util.Optional;

/**
 * What evaluating one notebook cell produced: the value of its last expression (if any), or the failure that stopped
 * it. Independent of the Jupyter protocol so that the evaluator can be tested and reused headless.
 */
public sealed interface CellResult {

    /** The cell ran to its end. */
    record Success(Optional<Object> value, boolean hasValue) implements CellResult {
        /** A cell whose last snippet was not an expression. */
        public static Success noValue() {
            return new Success(Optional.empty(), false);
        }

        /** A cell whose last snippet was an expression; {@code value} may be null (rendered as {@code null}). */
        public static Success of(Object value) {
            return new Success(Optional.ofNullable(value), true);
        }
    }

    /**
     * A snippet of the cell did not compile; nothing after it ran.
     *
     * @param problems one entry per diagnostic, with the position in the cell
     */
    record CompileFailure(List<Problem> problems) implements CellResult {
        /** @param problems the diagnostics (copied) */
        public CompileFailure {
            problems = List.copyOf(problems);
        }
    }

    /**
     * A snippet threw; nothing after it ran.
     *
     * @param errorName the exception's class name (the {@code ename} of the Jupyter error)
     * @param message the exception's message, or an empty string
     * @param traceback the lines to show, already trimmed to the user's cells and library frames
     * @param interrupted whether the failure came from an interrupt request
     */
    record RuntimeFailure(String errorName, String message, List<String> traceback, boolean interrupted)
            implements CellResult {
        /** @param traceback lines (copied) */
        public RuntimeFailure {
            traceback = List.copyOf(traceback);
        }
    }

    /**
     * A compile diagnostic placed in the cell.
     *
     * @param line 1-based line in the cell
     * @param column 1-based column in the cell
     * @param message the compiler's message
     * @param sourceLine the text of that line of the cell
     */
    record Problem(int line, int column, String message, String sourceLine) {
    }
}
