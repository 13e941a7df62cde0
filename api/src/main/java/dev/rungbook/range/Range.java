package dev.rungbook.range;

/**
 * A clipping range {@code [lo, hi]} with {@code lo <= hi}, both finite.
 *
 * @param lo the lower end
 * @param hi the upper end
 */
public record Range(double lo, double hi) {
    /** Checks the ends. */
    public Range {
        if (!Double.isFinite(lo) || !Double.isFinite(hi) || lo > hi) {
            throw new IllegalArgumentException("range [" + lo + ", " + hi + "] must be finite with lo <= hi");
        }
    }

    /** {@code max(|lo|, |hi|)}: the half-width of the symmetric range that covers this one. */
    public double absMax() {
        return Math.max(Math.abs(lo), Math.abs(hi));
    }

    /** This range scaled by {@code ratio} about zero. */
    public Range scaled(double ratio) {
        return new Range(lo * ratio, hi * ratio);
    }
}
