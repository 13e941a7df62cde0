package dev.rungbook.range;

/** A fixed range. */
final class FixedRule implements RangeRule {
    private final Range range;

    FixedRule(Range range) {
        this.range = range;
    }

    @Override
    public String label() {
        return "fixed[" + range.lo() + "," + range.hi() + "]";
    }

    @Override
    public Range range(float[] values, int from, int to, RangeContext ctx) {
        return range;
    }

    @Override
    public boolean equals(Object o) {
        return o instanceof FixedRule && ((FixedRule) o).range.equals(range);
    }

    @Override
    public int hashCode() {
        return range.hashCode();
    }

    @Override
    public String toString() {
        return label();
    }
}
