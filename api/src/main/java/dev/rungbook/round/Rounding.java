package dev.rungbook.round;

import java.util.Objects;

/**
 * A rule that turns scaled values into integer codes on a quantization grid.
 *
 * <p>A linear grid maps a value {@code x} with scale {@code s} and zero point {@code z} to the code
 * {@code clamp(round(x / s + z), qmin, qmax)}; this interface is the {@code round}. The scale is a float32 number, so
 * {@code x / s} of a value that is a level ({@code fl(s * q) = x}) can miss {@code q} by a few ulps: a scaled value
 * within {@code |x / s| 2^-22} of an integer is passed to the rule as that integer, so that values on a level stay on
 * it under floor, ceil, stochastic and custom rules. Every rule is one of two kinds:
 * {@link ElementRounding} (each value on its own, the common case) or {@link LayerRounding} (the whole weight tensor at
 * once, for rules that let the rounding of one weight depend on the others). Quantizers apply the clamp after an
 * element rule, so a rule never needs to know the grid's bounds.
 *
 * <p>The default of every quantizer is {@link #nearest()}: round to nearest, ties to even.
 *
 * <p>Rules are immutable values with a short stable {@link #label()} that appears in quantizer labels; two rules are
 * equal when they round alike (same kind and same parameters; custom rules are equal when they are the same object).
 */
public interface Rounding {
    /** A short stable name, e.g. {@code nearest-even}, {@code stochastic(seed=7)}. */
    String label();

    /** Round to nearest, ties to even (IEEE 754 roundTiesToEven). The default. */
    static ElementRounding nearest() {
        return StandardRounding.NEAREST_EVEN;
    }

    /** Round to nearest, ties away from zero (2.5 to 3, -2.5 to -3). */
    static ElementRounding nearestTiesAway() {
        return StandardRounding.NEAREST_AWAY;
    }

    /** Round toward negative infinity. */
    static ElementRounding floor() {
        return StandardRounding.FLOOR;
    }

    /** Round toward positive infinity. */
    static ElementRounding ceil() {
        return StandardRounding.CEIL;
    }

    /**
     * Adaptive rounding (AdaRound, Nagel et al. 2020) learned from {@code calibration} with the published defaults,
     * followed by our exact flip search ({@link AdaptiveRounding#polish(boolean) polish(false)} for the published
     * method alone); see {@link AdaptiveRounding} for the settings.
     */
    static AdaptiveRounding adaptive(Calibration calibration) {
        return AdaptiveRounding.of(calibration);
    }

    /**
     * Error-feedback rounding (GPTQ, Frantar et al. 2023) from {@code calibration} with the published defaults;
     * see {@link ErrorFeedbackRounding} for the settings.
     */
    static ErrorFeedbackRounding errorFeedback(Calibration calibration) {
        return ErrorFeedbackRounding.of(calibration);
    }

    /**
     * Stochastic rounding: {@code x} becomes {@code floor(x) + 1} with probability {@code x - floor(x)}, else
     * {@code floor(x)}, so that the expected code equals {@code x} (unbiased).
     *
     * <p>The random number for an element is a hash of the seed and the element's flat index, so the result is the
     * same for every run with that seed, whatever the order or thread in which elements are visited.
     */
    static ElementRounding stochastic(long seed) {
        return new StochasticRounding(seed);
    }

    /**
     * A user-defined element rule, e.g. {@code Rounding.custom("toward-zero", (x, i) -> x < 0 ? Math.ceil(x) :
     * Math.floor(x))}. The rule receives the scaled value and the element's flat row-major index, and must return an
     * integer-valued double (checked: a non-integer or non-finite result is refused with an error naming the rule and
     * the value).
     *
     * @param name the label shown in quantizer labels (must not be blank)
     */
    static ElementRounding custom(String name, ElementRule rule) {
        Objects.requireNonNull(rule, "rule");
        if (name == null || name.isBlank()) {
            throw new IllegalArgumentException("a custom rounding needs a non-blank name");
        }
        return new CustomRounding(name.strip(), rule);
    }

    /** The function behind {@link #custom}: scaled value and flat index in, integer-valued double out. */
    @FunctionalInterface
    interface ElementRule {
        /** The rounded (integer-valued) value of {@code scaled}, the element at flat index {@code index}. */
        double round(double scaled, long index);
    }
}
