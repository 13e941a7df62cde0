package dev.rungbook.cli;

import dev.rungbook.quant.Quantizer;
import dev.rungbook.quant.SpecSyntaxException;
import picocli.CommandLine.ITypeConverter;
import picocli.CommandLine.TypeConversionException;

/**
 * Reads {@code --spec} values with {@link Quantizer#parse}; a bad spec is a usage error (exit 2) whose message names
 * the bad token and its column.
 */
final class SpecConverter implements ITypeConverter<Quantizer> {
    /** The option help shared by the commands that take specs. */
    static final String HELP = "A quantizer spec in the spec text form, quoted, e.g. \"int4 per-group(1,128) mse\", "
            + "\"int8\", \"nf4\", \"fp8-e4m3 per-tensor\", \"uint8 asym per-tensor p99.9\" (grammar: "
            + "dev.rungbook.quant.SpecText).";

    /** The exit-code paragraph of the commands that take specs. */
    static final String EXIT_CODES = "Exit codes: 0 ok, 1 failure (unreadable file, a spec that does not fit a tensor), "
            + "2 usage error (including a bad spec, whose message names the bad token and its column).";

    @Override
    public Quantizer convert(String value) {
        try {
            return Quantizer.parse(value);
        } catch (SpecSyntaxException e) {
            throw new TypeConversionException(e.getMessage());
        }
    }
}
