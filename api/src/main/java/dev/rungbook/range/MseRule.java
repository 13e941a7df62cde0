package dev.rungbook.range;

/** Clip-ratio search minimising the squared error on the actual grid. */
final class MseRule implements RangeRule {
    private static final double INV_PHI = (Math.sqrt(5) - 1) / 2;
    private final int candidates;
    private final int refinements;

    MseRule(int candidates, int refinements) {
        if (candidates < 4) {
            throw new IllegalArgumentException("an MSE range search needs at least 4 candidates, got " + candidates);
        }
        this.candidates = candidates;
        this.refinements = refinements;
    }

    @Override
    public String label() {
        return candidates == 100 ? "mse" : "mse(" + candidates + ")";
    }

    @Override
    public Range range(float[] values, int from, int to, RangeContext ctx) {
        Range full = MinMaxRule.of(values, from, to);
        if (full.absMax() == 0) {
            return full;
        }
        double step = 1.0 / candidates;
        int best = candidates;
        double bestErr = Double.POSITIVE_INFINITY;
        for (int i = candidates; i >= 1; i--) {
            double e = ctx.squaredError(values, from, to, full.scaled(i * step));
            if (e < bestErr) {
                bestErr = e;
                best = i;
            }
        }
        double a = Math.max(step * 0.5, (best - 1) * step);
        double b = Math.min(1.0, (best + 1) * step);
        double bestRatio = best * step;
        double x1 = b - INV_PHI * (b - a);
        double x2 = a + INV_PHI * (b - a);
        double f1 = ctx.squaredError(values, from, to, full.scaled(x1));
        double f2 = ctx.squaredError(values, from, to, full.scaled(x2));
        for (int it = 0; it < refinements; it++) {
            if (f1 <= f2) {
                b = x2;
                x2 = x1;
                f2 = f1;
                x1 = b - INV_PHI * (b - a);
                f1 = ctx.squaredError(values, from, to, full.scaled(x1));
            } else {
                a = x1;
                x1 = x2;
                f1 = f2;
                x2 = a + INV_PHI * (b - a);
                f2 = ctx.squaredError(values, from, to, full.scaled(x2));
            }
        }
        if (f1 < bestErr) {
            bestErr = f1;
            bestRatio = x1;
        }
        if (f2 < bestErr) {
            bestRatio = x2;
        }
        return full.scaled(bestRatio);
    }

    @Override
    public boolean equals(Object o) {
        return o instanceof MseRule && ((MseRule) o).candidates == candidates
                && ((MseRule) o).refinements == refinements;
    }

    @Override
    public int hashCode() {
        return candidates * 31 + refinements;
    }

    @Override
    public String toString() {
        return label();
    }
}
