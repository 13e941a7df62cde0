package dev.rungbook.internal;

/**
 * Small reductions over float arrays shared by the kernels. Internal.
 *
 * <p>Minimum and maximum do not depend on the order in which values are visited ({@link Math#min} and
 * {@link Math#max} order {@code -0.0} below {@code 0.0} and propagate NaN), so any faster form of these loops returns
 * the same bits.
 */
public final class Lanes {
    private Lanes() {
    }

    /**
     * {@code {min, max}} of {@code v[from, to)} together with the starting values {@code lo} and {@code hi} (pass
     * {@code +Infinity, -Infinity} for the plain range of the values, {@code 0, 0} for a range that contains 0). A
     * NaN in the values gives NaN.
     */
    public static float[] minMax(float[] v, int from, int to, float lo, float hi) {
        float mn = lo;
        float mx = hi;
        for (int i = from; i < to; i++) {
            float x = v[i];
            mn = Math.min(mn, x);
            mx = Math.max(mx, x);
        }
        return new float[] {mn, mx};
    }
}
