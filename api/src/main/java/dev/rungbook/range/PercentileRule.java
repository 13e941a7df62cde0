package dev.rungbook.range;

import java.util.Arrays;

/** Percentile clipping, linear interpolation between order statistics. */
final class PercentileRule implements RangeRule {
    private final double p;

    PercentileRule(double p) {
        if (!(p > 50 && p <= 100)) {
            throw new IllegalArgumentException("percentile must be in (50, 100], got " + p);
        }
        this.p = p;
    }

    /** The {@code q}-th percentile (0..100) of sorted values {@code s}, linear interpolation. */
    static double percentileOfSorted(float[] s, double q) {
        if (s.length == 0) {
            return 0;
        }
        double h = (s.length - 1) * q / 100.0;
        int k = (int) Math.floor(h);
        if (k >= s.length - 1) {
            return s[s.length - 1];
        }
        return s[k] + (h - k) * ((double) s[k + 1] - s[k]);
    }

    @Override
    public String label() {
        String t = p == Math.rint(p) ? Long.toString((long) p) : Double.toString(p);
        return "p" + t;
    }

    @Override
    public Range range(float[] values, int from, int to, RangeContext ctx) {
        float[] s = Arrays.copyOfRange(values, from, to);
        if (ctx.symmetric()) {
            for (int i = 0; i < s.length; i++) {
                s[i] = Math.abs(s[i]);
            }
            Arrays.sort(s);
            double a = percentileOfSorted(s, p);
            return new Range(-a, a);
        }
        Arrays.sort(s);
        return new Range(percentileOfSorted(s, 100 - p), percentileOfSorted(s, p));
    }

    @Override
    public boolean equals(Object o) {
        return o instanceof PercentileRule && ((PercentileRule) o).p == p;
    }

    @Override
    public int hashCode() {
        return Double.hashCode(p);
    }

    @Override
    public String toString() {
        return label();
    }
}
