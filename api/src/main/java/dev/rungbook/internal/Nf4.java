package dev.rungbook.internal;

import org.apache.commons.math3.distribution.NormalDistribution;

/**
 * The 16 NF4 levels (Dettmers et al., "QLoRA", 2023), built from normal quantiles rather than copied from a table,
 * and nearest-level lookup. Internal.
 *
 * <p>Construction: {@code offset = 1 - (1/32 + 1/30) / 2}; positive levels are {@code Phi^-1} at 8 of 9 evenly spaced
 * probabilities from {@code offset} down to 0.5 (the 0.5 itself dropped), negative levels are minus {@code Phi^-1} at
 * 7 of 8 evenly spaced probabilities from {@code offset} to 0.5; add 0, sort, divide by the largest magnitude so the
 * levels span [-1, 1]. The arithmetic is in double, rounded to float at the end.
 */
public final class Nf4 {
    private static final float[] LEVELS = build();
    private static final double[] MIDPOINTS = midpoints(LEVELS);
    private static final SegmentKernels.Levels TABLE = SegmentKernels.Levels.of(LEVELS);

    private Nf4() {
    }

    private static float[] build() {
        NormalDistribution nd = new NormalDistribution(null, 0, 1, 1e-9);
        double offset = 1 - (1.0 / 32 + 1.0 / 30) / 2;
        double[] v = new double[16];
        int n = 0;
        for (int i = 0; i < 8; i++) { // linspace(offset, 0.5, 9) without its last point
            v[n++] = nd.inverseCumulativeProbability(offset + (0.5 - offset) * i / 8);
        }
        for (int i = 0; i < 7; i++) { // linspace(offset, 0.5, 8) without its last point
            v[n++] = -nd.inverseCumulativeProbability(offset + (0.5 - offset) * i / 7);
        }
        v[n] = 0;
        java.util.Arrays.sort(v);
        double max = v[15];
        float[] out = new float[16];
        for (int i = 0; i < 16; i++) {
            out[i] = (float) (v[i] / max);
        }
        return out;
    }

    private static double[] midpoints(float[] levels) {
        double[] m = new double[levels.length - 1];
        for (int i = 0; i < m.length; i++) {
            m[i] = 0.5 * ((double) levels[i] + levels[i + 1]);
        }
        return m;
    }

    /** The 16 levels as the segment kernels' lookup table ({@link SegmentKernels#levels}). */
    public static SegmentKernels.Levels table() {
        return TABLE;
    }

    /** The 16 levels, ascending, from -1 to 1 with an exact 0 at index 7 (a fresh copy). */
    public static float[] levels() {
        return LEVELS.clone();
    }

    /**
     * Index (0..15) of the level nearest to {@code x}; values beyond [-1, 1] go to the end levels. A value exactly
     * halfway between two levels (compared in double, so exactly) goes to the lower level.
     *
     * @throws IllegalArgumentException if {@code x} is NaN
     */
    public static int nearest(float x) {
        if (x != x) {
            throw new IllegalArgumentException("NF4: cannot round NaN");
        }
        int lo = 0;
        int hi = MIDPOINTS.length; // answer = number of midpoints strictly below x
        while (lo < hi) {
            int mid = (lo + hi) >>> 1;
            if (MIDPOINTS[mid] < x) {
                lo = mid + 1;
            } else {
                hi = mid;
            }
        }
        return lo;
    }
}
