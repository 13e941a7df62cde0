package dev.rungbook.plan;

import dev.rungbook.quant.Quantizer;
import java.util.List;
import java.util.Objects;

/**
 * One choice a layer's weight can take in a plan: a quantizer spec with a short label for table columns and charts
 * (for example {@code int4} for {@code Quantizer.linear(4)}).
 *
 * @param label short, non-blank, without line breaks
 * @param spec the quantizer applied to the layer's weight (axis 0 is the output channel)
 */
public record Candidate(String label, Quantizer spec) {
    /** Checks the label and the spec. */
    public Candidate {
        Objects.requireNonNull(label, "label");
        Objects.requireNonNull(spec, "spec of candidate '" + label + "'");
        if (label.isBlank() || label.indexOf('\n') >= 0 || label.indexOf('\r') >= 0) {
            throw new IllegalArgumentException("candidate label '" + label + "' must be non-blank and on one line");
        }
    }

    /** A candidate labelled {@code label}. */
    public static Candidate of(String label, Quantizer spec) {
        return new Candidate(label, spec);
    }

    /** A candidate labelled by the spec's {@link Quantizer#label()}. */
    public static Candidate of(Quantizer spec) {
        return new Candidate(spec.label(), spec);
    }

    /**
     * The default candidates: symmetric linear grids with one scale per output channel at 8, 6, 4, 3 and 2 bits,
     * labelled {@code int8}, {@code int6}, {@code int4}, {@code int3}, {@code int2}. They fit every weighted layer.
     */
    public static List<Candidate> defaults() {
        return List.of(of("int8", Quantizer.linear(8)), of("int6", Quantizer.linear(6)),
                of("int4", Quantizer.linear(4)), of("int3", Quantizer.linear(3)), of("int2", Quantizer.linear(2)));
    }

    @Override
    public String toString() {
        return label + " (" + spec.label() + ")";
    }
}
