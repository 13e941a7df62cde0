package dev.rungbook.round;

/** Seeded, counter-based stochastic rounding (see {@link Rounding#stochastic(long)}). */
final class StochasticRounding implements ElementRounding {
    private final long seed;

    StochasticRounding(long seed) {
        this.seed = seed;
    }

    @Override
    public String label() {
        return "stochastic(seed=" + seed + ")";
    }

    @Override
    public double round(double x, long index) {
        double f = Math.floor(x);
        double frac = x - f;
        return uniform(seed, index) < frac ? f + 1.0 : f;
    }

    /** A uniform double in [0, 1) from the SplitMix64 finaliser of (seed, index). */
    static double uniform(long seed, long index) {
        long z = seed + (index + 1) * 0x9E3779B97F4A7C15L;
        z = (z ^ (z >>> 30)) * 0xBF58476D1CE4E5B9L;
        z = (z ^ (z >>> 27)) * 0x94D049BB133111EBL;
        z = z ^ (z >>> 31);
        return (z >>> 11) * 0x1.0p-53;
    }

    @Override
    public boolean equals(Object o) {
        return o instanceof StochasticRounding && ((StochasticRounding) o).seed == seed;
    }

    @Override
    public int hashCode() {
        return Long.hashCode(seed) * 31 + 7;
    }

    @Override
    public String toString() {
        return label();
    }
}
