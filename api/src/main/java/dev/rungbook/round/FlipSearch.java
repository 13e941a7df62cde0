package dev.rungbook.round;

import dev.rungbook.internal.LinearAlgebra;
import java.util.stream.IntStream;

/**
 * A greedy exact local search over up/down roundings, run after adaptive rounding when its spec asks for it
 * ({@link AdaptiveRounding#polish(boolean)}). Our addition, not part of the published method. Package-private.
 *
 * <p>For a layer without activation the output error over all calibration samples is an exact quadratic in the
 * rounding errors {@code d_r = w_r - w~_r} of each row: {@code E = sum_r d_r^T H d_r} with {@code H = X^T X / n}
 * (a bias cancels). Rows are independent. Flipping weight {@code j} of a row between its two candidate codes
 * ({@code floor(w / s + z)} and one more, clamped to the code range) changes {@code d_j} by {@code delta} and the
 * error by exactly {@code 2 delta (H d)_j + delta^2 H_jj}. Per row the search applies the flip that lowers the error
 * most, updates {@code H d} by {@code delta} times a column of {@code H}, and repeats until no single flip lowers it
 * (a single flip is taken only when it lowers the error by more than {@code 1e-10} of its own terms, far above the
 * rounding of the float64 arithmetic). Then it tries a chain, in the manner of variable-depth local search: flip the
 * best weight not yet flipped in this chain even if the error rises, up to {@link #CHAIN_DEPTH} flips, and keep the
 * prefix of the chain with the lowest error; if the row's exact error ({@code d^T H d}) is then lower, it goes back
 * to single flips, else it restores the row and stops. So the search never raises the error and always ends; it
 * finds a local optimum, not always the global one.
 *
 * <p>With a following ReLU the output error is no longer quadratic; the search then minimises the pre-activation
 * quadratic above, and its result is kept only if the exact after-activation error on all calibration samples is not
 * higher than that of the codes it started from.
 */
final class FlipSearch {
    /** The longest chain of flips tried at once. */
    static final int CHAIN_DEPTH = 128;
    /** Rows longer than this skip the pair moves (their cost grows with the square of the row length). */
    static final int PAIR_LIMIT = 64;

    private FlipSearch() {
    }

    /**
     * Improves {@code start} (codes, row-major {@code rows x cols}) by flips between {@code down} and {@code up};
     * returns new codes ({@code start} is not modified).
     */
    static int[] improve(LinearAlgebra la, AdaptiveObjective obj, float[] w, float[] x, int n, int[] start) {
        int rows = obj.rows;
        int cols = obj.cols;
        int[] down = obj.downCodes();
        int[] up = new int[down.length];
        for (int e = 0; e < up.length; e++) {
            up[e] = Math.min(obj.qmax(), Math.max(obj.qmin(), down[e] + 1));
        }
        // H = X^T X / n in float64 (the inputs converted exactly).
        double[] xd = new double[n * cols];
        for (int i = 0; i < xd.length; i++) {
            xd[i] = x[i];
        }
        double[] h = new double[cols * cols];
        la.dgemm(true, false, cols, cols, n, 1.0 / n, xd, 0, cols, xd, 0, cols, 0.0, h, 0, cols);
        for (int i = 0; i < cols; i++) {
            for (int j = 0; j < i; j++) {
                double v = 0.5 * (h[i * cols + j] + h[j * cols + i]);
                h[i * cols + j] = v;
                h[j * cols + i] = v;
            }
        }
        // Starts: the given codes, rounding to nearest and, for rows of at most PAIR_LIMIT weights, all down and all
        // up; per row the lowest error wins (rows are independent). The given codes come first and win ties.
        int size = rows * cols;
        int[][] starts = new int[cols <= PAIR_LIMIT ? 4 : 2][];
        starts[0] = start.clone();
        starts[1] = new int[size];
        if (starts.length > 2) {
            starts[2] = down.clone();
            starts[3] = up.clone();
        }
        for (int e = 0; e < size; e++) {
            double exact = obj.scaledWeight(e, w[e]);
            starts[1][e] = Math.min(obj.qmax(), Math.max(obj.qmin(), (int) Math.floor(exact + 0.5)));
        }
        double[][] err = new double[starts.length][];
        for (int k = 0; k < starts.length; k++) {
            int[] codes = starts[k];
            double[] d = new double[size];
            for (int e = 0; e < size; e++) {
                d[e] = w[e] - obj.value(e, codes[e]);
            }
            double[] g = new double[size];
            la.dgemm(false, false, rows, cols, cols, 1.0, d, 0, cols, h, 0, cols, 0.0, g, 0, cols);
            double[] rowErr = new double[rows];
            IntStream.range(0, rows).parallel().forEach(r -> {
                row(obj, r, cols, h, codes, down, up, d, g);
                rowErr[r] = rowError(r * cols, cols, d, g);
            });
            err[k] = rowErr;
        }
        int[] codes = starts[0].clone();
        for (int r = 0; r < rows; r++) {
            int bestK = 0;
            for (int k = 1; k < starts.length; k++) {
                if (err[k][r] < err[bestK][r]) {
                    bestK = k;
                }
            }
            System.arraycopy(starts[bestK], r * cols, codes, r * cols, cols);
        }
        return codes;
    }

    /** The search on row {@code r}: {@code d} and {@code g = H d} of the row are kept up to date. */
    private static void row(AdaptiveObjective obj, int r, int cols, double[] h, int[] codes, int[] down, int[] up,
            double[] d, double[] g) {
        int o = r * cols;
        double[] delta = new double[cols];
        double[] gain = new double[cols];
        int[] order = new int[cols];
        boolean[] locked = new boolean[cols];
        int[] savedCodes = new int[cols];
        double[] savedD = new double[cols];
        double[] savedG = new double[cols];
        int depth = Math.min(cols, CHAIN_DEPTH);
        // Bounded as a safeguard; every kept move strictly lowers a function of finitely many states.
        for (int guard = 0; guard < 64 * cols + 64; guard++) {
            // Single flips while one lowers the error.
            int best = gains(obj, o, cols, h, codes, down, up, g, delta, gain, null, true);
            if (best >= 0) {
                flip(r, cols, best, delta[best], h, codes, down, up, d, g);
                continue;
            }
            if (cols <= PAIR_LIMIT && pair(obj, r, cols, h, codes, down, up, d, g, delta, gain)) {
                continue;
            }
            // A chain: flip the best unflipped weight even if the error rises, up to depth flips, and keep the best
            // prefix; the row is restored unless its exact error ends lower.
            System.arraycopy(codes, o, savedCodes, 0, cols);
            System.arraycopy(d, o, savedD, 0, cols);
            System.arraycopy(g, o, savedG, 0, cols);
            double before = rowError(o, cols, d, g);
            java.util.Arrays.fill(locked, false);
            double sum = 0;
            double bestSum = 0;
            int bestLen = 0;
            int len = 0;
            for (; len < depth; len++) {
                int j = gains(obj, o, cols, h, codes, down, up, g, delta, gain, locked, false);
                if (j < 0) {
                    break;
                }
                sum += gain[j];
                flip(r, cols, j, delta[j], h, codes, down, up, d, g);
                locked[j] = true;
                order[len] = j;
                if (sum < bestSum) {
                    bestSum = sum;
                    bestLen = len + 1;
                }
            }
            // Undo the flips after the best prefix.
            for (int k = len - 1; k >= bestLen; k--) {
                int j = order[k];
                int e = o + j;
                int alt = codes[e] == up[e] ? down[e] : up[e];
                flip(r, cols, j, obj.value(e, codes[e]) - obj.value(e, alt), h, codes, down, up, d, g);
            }
            double after = rowError(o, cols, d, g);
            if (bestLen == 0 || !(after < before - 1e-12 * Math.abs(before))) {
                System.arraycopy(savedCodes, 0, codes, o, cols);
                System.arraycopy(savedD, 0, d, o, cols);
                System.arraycopy(savedG, 0, g, o, cols);
                return;
            }
        }
    }

    /**
     * Applies the pair of flips that lowers the error most ({@code gain_i + gain_j + 2 delta_i delta_j H_ij}), if one
     * lowers it by more than {@code 1e-10} of its terms; {@code delta} and {@code gain} are those of the current state.
     */
    private static boolean pair(AdaptiveObjective obj, int r, int cols, double[] h, int[] codes, int[] down,
            int[] up, double[] d, double[] g, double[] delta, double[] gain) {
        int o = r * cols;
        int bi = -1;
        int bj = -1;
        double bestGain = 0;
        for (int i = 0; i < cols; i++) {
            if (codes[o + i] == (codes[o + i] == up[o + i] ? down[o + i] : up[o + i])) {
                continue;
            }
            for (int j = i + 1; j < cols; j++) {
                if (codes[o + j] == (codes[o + j] == up[o + j] ? down[o + j] : up[o + j])) {
                    continue;
                }
                double cross = 2 * delta[i] * delta[j] * h[i * cols + j];
                double pair = gain[i] + gain[j] + cross;
                double size = Math.abs(2 * delta[i] * g[o + i]) + delta[i] * delta[i] * h[i * cols + i]
                        + Math.abs(2 * delta[j] * g[o + j]) + delta[j] * delta[j] * h[j * cols + j] + Math.abs(cross);
                if (pair < bestGain && pair < -1e-10 * size) {
                    bestGain = pair;
                    bi = i;
                    bj = j;
                }
            }
        }
        if (bi < 0) {
            return false;
        }
        double di = delta[bi];
        double dj = delta[bj];
        flip(r, cols, bi, di, h, codes, down, up, d, g);
        flip(r, cols, bj, dj, h, codes, down, up, d, g);
        return true;
    }

    /** {@code d_r^T H d_r} of the row at offset {@code o}, from {@code d} and {@code g = H d}. */
    private static double rowError(int o, int cols, double[] d, double[] g) {
        double s = 0;
        for (int j = 0; j < cols; j++) {
            s += d[o + j] * g[o + j];
        }
        return s;
    }

    /**
     * Fills {@code delta} (the change of d) and {@code gain} (the change of the error) of flipping each weight of the
     * row and returns the flip with the lowest gain among those not {@code locked}: with {@code improving}, only a
     * flip that lowers the error by more than {@code 1e-10} of its own terms (else -1); otherwise any flippable one.
     */
    private static int gains(AdaptiveObjective obj, int o, int cols, double[] h, int[] codes, int[] down, int[] up,
            double[] g, double[] delta, double[] gain, boolean[] locked, boolean improving) {
        int best = -1;
        double bestGain = improving ? 0 : Double.POSITIVE_INFINITY;
        for (int j = 0; j < cols; j++) {
            int e = o + j;
            int alt = codes[e] == up[e] ? down[e] : up[e];
            if (alt == codes[e] || (locked != null && locked[j])) {
                continue;
            }
            double dj = obj.value(e, codes[e]) - obj.value(e, alt);
            delta[j] = dj;
            double lin = 2 * dj * g[e];
            double quad = dj * dj * h[j * cols + j];
            gain[j] = lin + quad;
            if (gain[j] < bestGain && (!improving || gain[j] < -1e-10 * (Math.abs(lin) + quad))) {
                bestGain = gain[j];
                best = j;
            }
        }
        return best;
    }

    private static void flip(int r, int cols, int j, double dj, double[] h, int[] codes, int[] down, int[] up,
            double[] d, double[] g) {
        int o = r * cols;
        int e = o + j;
        codes[e] = codes[e] == up[e] ? down[e] : up[e];
        d[e] += dj;
        for (int k = 0; k < cols; k++) {
            g[o + k] += dj * h[j * cols + k];
        }
    }
}
