package dev.rungbook.plan;

import java.nio.file.Path;

/**
 * A plan file that cannot be read: malformed JSON, a missing or unknown field, a value of the wrong type, a duplicate
 * layer or a spec text that does not parse. The message names the file, the field (for example
 * {@code layers[2].spec}) and the problem.
 */
public final class PlanFormatException extends IllegalArgumentException {
    private static final long serialVersionUID = 1L;

    private final transient Path file;
    private final String field;

    PlanFormatException(Path file, String field, String problem) {
        super(file + (field == null ? "" : ": field '" + field + "'") + ": " + problem);
        this.file = file;
        this.field = field;
    }

    PlanFormatException(Path file, String field, String problem, Throwable cause) {
        this(file, field, problem);
        initCause(cause);
    }

    /** The plan file. */
    public Path file() {
        return file;
    }

    /** The field at fault ({@code layers[2].spec}), or null for a problem of the whole file. */
    public String field() {
        return field;
    }
}
