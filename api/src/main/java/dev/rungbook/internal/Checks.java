package dev.rungbook.internal;

/** Argument checks that build messages naming their values. Internal. */
public final class Checks {
    private Checks() {
    }

    /** Throws {@link IllegalArgumentException} with the formatted message unless {@code condition} holds. */
    public static void require(boolean condition, String format, Object... args) {
        if (!condition) {
            throw new IllegalArgumentException(String.format(java.util.Locale.ROOT, format, args));
        }
    }

    /** Returns {@code value} if it lies in [lo, hi], else throws naming {@code what}. */
    public static int inRange(int value, int lo, int hi, String what) {
        if (value < lo || value > hi) {
            throw new IllegalArgumentException(what + " must be in [" + lo + ", " + hi + "], got " + value);
        }
        return value;
    }
}
