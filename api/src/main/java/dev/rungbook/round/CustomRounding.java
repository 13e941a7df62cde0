package dev.rungbook.round;

/** A named user rule (see {@link Rounding#custom}); checks that the rule returns integers. */
final class CustomRounding implements ElementRounding {
    private final String name;
    private final Rounding.ElementRule rule;

    CustomRounding(String name, Rounding.ElementRule rule) {
        this.name = name;
        this.rule = rule;
    }

    @Override
    public String label() {
        return name;
    }

    @Override
    public double round(double scaled, long index) {
        double r = rule.round(scaled, index);
        if (!Double.isFinite(r) || r != Math.rint(r)) {
            throw new IllegalArgumentException("rounding '" + name + "' returned " + r + " for scaled value "
                    + scaled + " at index " + index + "; a rounding must return an integer");
        }
        return r;
    }

    @Override
    public String toString() {
        return name;
    }
}
