package dev.rungbook.quant;

/**
 * A spec text that {@link SpecText#parse} cannot turn into a {@link Quantizer}: a misspelt or unknown token, a bad
 * number, a repeated or conflicting option, or an option the grid does not take. The message names the offending
 * token and its column, for example
 * {@code spec 'int4 per-grup(1,128)': unknown option 'per-grup(1,128)' at column 6 (...)}.
 *
 * <p>It is an {@link IllegalArgumentException}, like every other refusal of a bad argument in this library, so
 * callers that already catch those need nothing new; command lines map it to a usage error.
 */
public final class SpecSyntaxException extends IllegalArgumentException {
    private static final long serialVersionUID = 1L;

    private final String spec;
    private final String token;
    private final int position;

    SpecSyntaxException(String spec, String token, int position, String problem) {
        super("spec '" + spec + "': " + problem + (token.isEmpty() ? "" : " '" + token + "'") + " at column "
                + (position + 1));
        this.spec = spec;
        this.token = token;
        this.position = position;
    }

    SpecSyntaxException(String spec, String token, int position, String problem, String detail) {
        super("spec '" + spec + "': " + problem + (token.isEmpty() ? "" : " '" + token + "'") + " at column "
                + (position + 1) + ": " + detail);
        this.spec = spec;
        this.token = token;
        this.position = position;
    }

    /** The whole spec text that was refused. */
    public String spec() {
        return spec;
    }

    /** The offending token (or argument) as written; empty when the text ended too early or is empty. */
    public String token() {
        return token;
    }

    /** The 0-based character offset of {@link #token()} in {@link #spec()} (the message shows it 1-based). */
    public int position() {
        return position;
    }
}
