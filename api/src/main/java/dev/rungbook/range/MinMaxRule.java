package dev.rungbook.range;

/** The segment's min and max. */
final class MinMaxRule implements RangeRule {
    static final MinMaxRule INSTANCE = new MinMaxRule();

    private MinMaxRule() {
    }

    static Range of(float[] v, int from, int to) {
        float lo = Float.POSITIVE_INFINITY;
        float hi = Float.NEGATIVE_INFINITY;
        for (int i = from; i < to; i++) {
            float x = v[i];
            lo = Math.min(lo, x);
            hi = Math.max(hi, x);
        }
        return from == to ? new Range(0, 0) : new Range(lo, hi);
    }

    @Override
    public String label() {
        return "minmax";
    }

    @Override
    public Range range(float[] values, int from, int to, RangeContext ctx) {
        return of(values, from, to);
    }

    @Override
    public String toString() {
        return label();
    }
}
