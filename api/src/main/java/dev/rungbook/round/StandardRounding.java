package dev.rungbook.round;

/** The deterministic element rules. Package-private; reached through {@link Rounding}'s factories. */
enum StandardRounding implements ElementRounding {
    NEAREST_EVEN("nearest-even"),
    NEAREST_AWAY("nearest-away"),
    FLOOR("floor"),
    CEIL("ceil");

    private final String label;

    StandardRounding(String label) {
        this.label = label;
    }

    @Override
    public String label() {
        return label;
    }

    @Override
    public double round(double x, long index) {
        switch (this) {
            case NEAREST_EVEN:
                return Math.rint(x);
            case NEAREST_AWAY:
                return tiesAway(x);
            case FLOOR:
                return Math.floor(x);
            default:
                return Math.ceil(x);
        }
    }

    /** Nearest, ties away from zero; exact (the fractional part of a double is computed without error). */
    static double tiesAway(double x) {
        double a = Math.abs(x);
        double t = Math.floor(a);
        double r = a - t >= 0.5 ? t + 1.0 : t;
        return Math.copySign(r, x);
    }

    @Override
    public String toString() {
        return label;
    }
}
