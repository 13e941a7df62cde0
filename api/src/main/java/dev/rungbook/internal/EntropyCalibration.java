package dev.rungbook.internal;

/**
 * Entropy (KL-divergence) calibration of a symmetric clipping threshold, following the published 8-bit inference
 * calibration procedure. Internal.
 *
 * <p>Procedure on a histogram of {@code |x|} with {@code B} bins (default 2048) and {@code L} target levels (default
 * 128): for every candidate {@code i} in {@code L .. B-1}, the reference {@code P} is bins {@code [0, i)} with the
 * mass of all later bins (the clipped outliers) added to {@code P[i-1]}; the candidate {@code Q} is bins
 * {@code [0, i)} (without the outlier mass) merged into {@code L} levels of {@code i / L} bins each (the last level
 * takes the remainder) and expanded back by spreading each level's mass evenly over the bins of that level where
 * {@code P} is non-zero. Both are normalised and {@code KL(P || Q) = sum P log(P / Q)} (natural log) is computed;
 * the candidate with the smallest divergence wins (the first one on ties) and the threshold is
 * {@code (i + 0.5) * binWidth}.
 *
 * <p>Zeros: bins with {@code P = 0} contribute nothing. {@code Q} can only be zero where {@code P > 0} at bin
 * {@code i-1}, when the outlier mass lands in a level whose own bins are all empty; this implementation does not
 * smooth: such a candidate has divergence {@code +inf} (Q cannot represent that mass) and is never chosen. With more
 * than {@code L} non-empty bins some non-empty bin {@code J >= L-1} lies before the last bin, and the candidate
 * {@code i = J + 1} is finite, so a minimum always exists. An all-zero histogram gives threshold 0, bin 0,
 * divergence 0.
 *
 * <p>Sparse histograms: with at most {@code L} non-empty bins the procedure degenerates (a candidate that clips
 * everything into one surviving bin has divergence 0), so nothing is clipped: {@code bestBin} is one past the last
 * non-empty bin, the threshold is that bin's upper edge, and the divergence is that candidate's (0 when fewer than
 * {@code L} bins are kept, each bin then being its own level).
 */
public final class EntropyCalibration {
    /** Histogram bins of the published procedure. */
    public static final int DEFAULT_BINS = 2048;
    /** Target levels of the published procedure (the positive half of int8). */
    public static final int DEFAULT_LEVELS = 128;

    private EntropyCalibration() {
    }

    /**
     * A calibrated threshold.
     *
     * @param threshold the clipping threshold for {@code |x|}
     * @param bestBin the number of bins kept by the winning candidate
     * @param divergence its {@code KL(P || Q)} in nats
     */
    public record Result(double threshold, int bestBin, double divergence) {
    }

    /** {@link #threshold(double[], double, int)} with {@link #DEFAULT_LEVELS} levels. */
    public static Result threshold(double[] histogramOfAbs, double binWidth) {
        return threshold(histogramOfAbs, binWidth, DEFAULT_LEVELS);
    }

    /**
     * Calibrates on raw values: a {@link #DEFAULT_BINS}-bin histogram of {@code |x|} over {@code [0, max|x|]}, then
     * {@link #threshold(double[], double, int)} with {@link #DEFAULT_LEVELS} levels. All-zero values give threshold 0.
     *
     * @throws IllegalArgumentException for NaN or infinite values (naming the first bad index)
     */
    public static Result threshold(float[] values) {
        double maxAbs = 0;
        for (int i = 0; i < values.length; i++) {
            float v = values[i];
            if (!Float.isFinite(v)) {
                throw new IllegalArgumentException("entropy calibration: value at index " + i + " is " + v);
            }
            maxAbs = Math.max(maxAbs, Math.abs(v));
        }
        if (maxAbs == 0) {
            return new Result(0, 0, 0);
        }
        return threshold(histogramOfAbs(values, DEFAULT_BINS, maxAbs), maxAbs / DEFAULT_BINS, DEFAULT_LEVELS);
    }

    /**
     * Runs the procedure described in the class comment.
     *
     * @param histogramOfAbs non-negative finite bin masses of {@code |x|}, bin {@code j} covering
     *     {@code [j w, (j+1) w)}; more bins than levels (not modified)
     * @param binWidth {@code w}, positive and finite
     * @param targetLevels {@code L}, at least 1
     */
    public static Result threshold(double[] histogramOfAbs, double binWidth, int targetLevels) {
        double[] h = histogramOfAbs;
        int bins = h.length;
        Checks.require(targetLevels >= 1, "target levels must be at least 1, got %d", targetLevels);
        Checks.require(bins > targetLevels, "histogram needs more bins than target levels: %d bins, %d levels", bins,
                targetLevels);
        Checks.require(binWidth > 0 && Double.isFinite(binWidth), "bin width must be positive and finite, got %s",
                binWidth);
        double total = 0;
        for (int j = 0; j < bins; j++) {
            Checks.require(h[j] >= 0 && Double.isFinite(h[j]), "histogram bin %d holds %s (must be finite, >= 0)", j,
                    h[j]);
            total += h[j];
        }
        if (total == 0) {
            return new Result(0, 0, 0);
        }
        int nonEmpty = 0;
        int last = -1;
        for (int j = 0; j < bins; j++) {
            if (h[j] > 0) {
                nonEmpty++;
                last = j;
            }
        }
        if (nonEmpty <= targetLevels) {
            // Too few non-empty bins for the divergence to mean anything (a candidate whose P keeps a single
            // non-empty bin scores 0 however much it clips): keep everything.
            int keep = last + 1;
            double d = keep >= targetLevels ? candidate(h, keep, 0, targetLevels, new double[bins], new double[bins])
                    : 0;
            return new Result(keep * binWidth, keep, d);
        }
        // suffix[j] = mass of bins j..bins-1
        double[] suffix = new double[bins + 1];
        for (int j = bins - 1; j >= 0; j--) {
            suffix[j] = suffix[j + 1] + h[j];
        }
        double best = Double.POSITIVE_INFINITY;
        int bestI = -1;
        double[] p = new double[bins];
        double[] q = new double[bins];
        for (int i = targetLevels; i < bins; i++) {
            double d = candidate(h, i, suffix[i], targetLevels, p, q);
            if (d < best) {
                best = d;
                bestI = i;
            }
        }
        if (bestI < 0) {
            throw new IllegalStateException("no finite candidate among " + bins + " bins (cannot happen)");
        }
        return new Result((bestI + 0.5) * binWidth, bestI, best);
    }

    /** KL(P || Q) of candidate {@code i}; fills {@code p} and {@code q} on {@code [0, i)}. */
    private static double candidate(double[] h, int i, double outliers, int levels, double[] p, double[] q) {
        System.arraycopy(h, 0, p, 0, i);
        p[i - 1] += outliers;
        mergeAndExpand(h, p, i, levels, q);
        return klDivergence(p, q, i);
    }

    /**
     * Merges {@code p} into {@code levels} levels and expands back over the bins where {@code p} is non-zero:
     * the {@code j}-th level covers bins {@code [j m, (j+1) m)} with {@code m = p.length / levels}, the last level
     * also takes the remaining bins; each level's total is shared equally among its non-zero bins. Example: [1, 0, 2,
     * 3, 5, 3, 1, 7] into 2 levels gives sums [6, 16] and the expansion [2, 0, 2, 2, 4, 4, 4, 4].
     *
     * @param p non-negative masses, at least {@code levels} of them (not modified)
     * @return a new array of the same length with the same total
     */
    public static double[] mergeAndExpand(double[] p, int levels) {
        Checks.require(levels >= 1 && p.length >= levels, "cannot merge %d bins into %d levels", p.length, levels);
        double[] q = new double[p.length];
        mergeAndExpand(p, p, p.length, levels, q);
        return q;
    }

    /** Merges {@code source[0, n)} by levels and expands over the non-zero bins of {@code mask[0, n)} into q. */
    private static void mergeAndExpand(double[] source, double[] mask, int n, int levels, double[] q) {
        int per = n / levels;
        for (int j = 0; j < levels; j++) {
            int from = j * per;
            int to = j == levels - 1 ? n : from + per;
            double sum = 0;
            int nonZero = 0;
            for (int b = from; b < to; b++) {
                sum += source[b];
                if (mask[b] != 0) {
                    nonZero++;
                }
            }
            double share = nonZero == 0 ? 0 : sum / nonZero;
            for (int b = from; b < to; b++) {
                q[b] = mask[b] != 0 ? share : 0;
            }
        }
    }

    /**
     * {@code KL(P || Q)} in nats after normalising both to sum 1: {@code sum_{P>0} P log(P/Q)}, {@code +inf} where
     * {@code Q = 0 < P} or {@code Q} is all zero; 0 when {@code P} is all zero.
     */
    public static double klDivergence(double[] p, double[] q) {
        Checks.require(p.length == q.length, "P has %d bins but Q has %d", p.length, q.length);
        return klDivergence(p, q, p.length);
    }

    private static double klDivergence(double[] p, double[] q, int n) {
        double sp = 0;
        double sq = 0;
        for (int b = 0; b < n; b++) {
            sp += p[b];
            sq += q[b];
        }
        if (sp == 0) {
            return 0;
        }
        if (sq == 0) {
            return Double.POSITIVE_INFINITY;
        }
        double kl = 0;
        for (int b = 0; b < n; b++) {
            if (p[b] > 0) {
                if (q[b] <= 0) {
                    return Double.POSITIVE_INFINITY;
                }
                double pn = p[b] / sp;
                kl += pn * Math.log(pn / (q[b] / sq));
            }
        }
        return Math.max(0, kl);
    }

    /**
     * Histogram of {@code |x|} with {@code bins} equal bins over {@code [0, maxAbs]}: bin
     * {@code min(bins - 1, floor(|x| / maxAbs * bins))}; magnitudes at or above {@code maxAbs} go to the last bin.
     *
     * @throws IllegalArgumentException for NaN or infinite values (naming the index), or bad bins or range
     */
    public static double[] histogramOfAbs(float[] values, int bins, double maxAbs) {
        Checks.require(bins >= 1, "histogram needs at least 1 bin, got %d", bins);
        Checks.require(maxAbs > 0 && Double.isFinite(maxAbs), "histogram range max |x| must be positive and finite, "
                + "got %s", maxAbs);
        double[] h = new double[bins];
        double scale = bins / maxAbs;
        for (int i = 0; i < values.length; i++) {
            float v = values[i];
            if (!Float.isFinite(v)) {
                throw new IllegalArgumentException("histogram: value at index " + i + " is " + v);
            }
            double b = Math.abs((double) v) * scale;
            h[b >= bins ? bins - 1 : (int) b]++;
        }
        return h;
    }
}
