package dev.rungbook.internal;

/** Scale helpers shared by the quantizer's engine and the fused kernels. Internal. */
public final class Scales {
    private Scales() {
    }

    /**
     * The float32 scale near {@code s} (within two ulps) for which {@code (float)(scale * top) == (float) target},
     * if there is one, else {@code (float) s} (never 0: {@link Float#MIN_VALUE} for a scale that underflows; never
     * so large that {@code scale * top} overflows float32): so that the value at the end of the range is reproduced
     * exactly.
     */
    public static float fit(double s, double target, double top) {
        float f = (float) s;
        float goal = (float) target;
        // the candidates in the order f, up, down, up twice, down twice (no array: this runs once per segment)
        float up = Math.nextUp(f);
        float down = Math.nextDown(f);
        float up2 = Math.nextUp(up);
        float down2 = Math.nextDown(down);
        if (fits(f, top, goal)) {
            return f;
        }
        if (fits(up, top, goal)) {
            return up;
        }
        if (fits(down, top, goal)) {
            return down;
        }
        if (fits(up2, top, goal)) {
            return up2;
        }
        if (fits(down2, top, goal)) {
            return down2;
        }
        if (!(f > 0)) {
            return Float.MIN_VALUE;
        }
        // never let the end of the range overflow float32 (ranges near Float.MAX_VALUE)
        while (Float.isInfinite((float) (f * top)) && f > Float.MIN_VALUE) {
            f = Math.nextDown(f);
        }
        return f;
    }

    private static boolean fits(float c, double top, float goal) {
        return c > 0 && (float) (c * top) == goal;
    }
}
