package dev.rungbook.round;

import dev.rungbook.internal.LinearAlgebra;
import dev.rungbook.progress.Progress;
import java.util.ArrayList;
import java.util.Arrays;
import java.util.List;
import java.util.Locale;

/**
 * The error-feedback (GPTQ) kernel on a row-major weight {@code W} ({@code rows x cols}, i.e. out x in).
 * Package-private; reached through {@link ErrorFeedbackRounding}.
 *
 * <p>With {@code H = 2 X^T X / N} (the factor {@code 1/N} keeps values moderate; a constant factor changes nothing,
 * since damping is relative and the updates are ratios of entries of {@code U}), the columns of {@code W} are
 * quantized one after another; after column {@code j} is rounded to {@code q}, the error
 * {@code e = (w_j - q_j) / U_jj} is fed into the later columns: {@code w_k -= e * U_jk}, where {@code U} is the upper
 * Cholesky factor of {@code H^-1} ({@code H^-1 = U^T U}). Inside a block of columns the update is done column by
 * column; the later blocks receive the block's errors at once as one matrix product (lazy batch update).
 */
final class ErrorFeedback {
    /** How far damping may be raised (share of the mean diagonal) before the layer is refused. */
    static final double MAX_DAMPING = 10.0;

    private ErrorFeedback() {
    }

    /** The outcome of one run. */
    static final class Outcome {
        final int[] codes;
        final double[] loss;
        final List<String> warnings;
        final double damping;

        Outcome(int[] codes, double[] loss, List<String> warnings, double damping) {
            this.codes = codes;
            this.loss = loss;
            this.warnings = warnings;
            this.damping = damping;
        }
    }

    /**
     * Runs the procedure.
     *
     * @param w the weight, row-major {@code rows x cols} (not modified)
     * @param x calibration inputs, row-major {@code n x cols} (not modified)
     * @param grid where each weight sits
     * @param scales per-segment scales; modified (refitted) only when {@code refit} is used
     * @param zps per-segment zero points; modified with {@code scales}
     * @param refit when not null and the grid is per group along the input axis (and no activation order), the group
     *     grids are refitted from the updated weights when the group's first column is reached
     * @param dampShare damping as a share of the mean diagonal of {@code H}
     */
    static Outcome run(LinearAlgebra la, float[] w, int rows, int cols, float[] x, int n, GridAssignment grid,
            float[] scales, float[] zps, SegmentRefit refit, double dampShare, int blockSize, boolean actOrder,
            Progress progress, String task) {
        List<String> warnings = new ArrayList<>();
        double[] h = la.gram(x, n, cols);
        double f = 2.0 / n;
        for (int i = 0; i < h.length; i++) {
            h[i] *= f;
        }
        float[] wt = new float[rows * cols]; // W^T: row j holds column j of W
        for (int r = 0; r < rows; r++) {
            for (int j = 0; j < cols; j++) {
                wt[j * rows + r] = w[r * cols + j];
            }
        }
        // Dead inputs (zero on every calibration sample): H_ii = 1 and the weight column set to 0, as published.
        int dead = 0;
        for (int i = 0; i < cols; i++) {
            if (h[i * cols + i] == 0.0) {
                h[i * cols + i] = 1.0;
                Arrays.fill(wt, i * rows, (i + 1) * rows, 0f);
                dead++;
            }
        }
        if (dead > 0) {
            warnings.add(dead + " of " + cols + " inputs are zero on every calibration sample; their weights were set"
                    + " to 0");
        }
        for (double v : h) {
            if (!Double.isFinite(v)) {
                throw new IllegalArgumentException(task + ": the calibration inputs are too large (X^T X overflows)");
            }
        }
        int[] perm = new int[cols];
        for (int i = 0; i < cols; i++) {
            perm[i] = i;
        }
        if (actOrder) {
            double[] diag = new double[cols];
            for (int i = 0; i < cols; i++) {
                diag[i] = h[i * cols + i];
            }
            perm = java.util.stream.IntStream.range(0, cols).boxed()
                    .sorted((a, b) -> diag[a] != diag[b] ? Double.compare(diag[b], diag[a]) : Integer.compare(a, b))
                    .mapToInt(Integer::intValue).toArray();
            double[] hp = new double[h.length];
            float[] wp = new float[wt.length];
            for (int a = 0; a < cols; a++) {
                for (int b = 0; b < cols; b++) {
                    hp[a * cols + b] = h[perm[a] * cols + perm[b]];
                }
                System.arraycopy(wt, perm[a] * rows, wp, a * rows, rows);
            }
            h = hp;
            wt = wp;
        }
        double meanDiag = 0;
        for (int i = 0; i < cols; i++) {
            meanDiag += h[i * cols + i];
        }
        meanDiag /= cols;
        double share = dampShare;
        double[] u;
        while (true) {
            u = h.clone();
            double damp = share * meanDiag;
            for (int i = 0; i < cols; i++) {
                u[i * cols + i] += damp;
            }
            if (la.inverseUpperCholesky(u, cols) && finite(u)) {
                break;
            }
            double next = share > 0 ? share * 10 : 0.01;
            if (next > MAX_DAMPING * (1 + 1e-12)) {
                throw new IllegalArgumentException(task + ": the Hessian of the calibration inputs is not positive "
                        + "definite even with damping " + fmt(share) + " of its mean diagonal " + meanDiag);
            }
            warnings.add("damping raised from " + fmt(share) + " to " + fmt(next) + " of the mean diagonal: H + damping"
                    + " was not positive definite");
            share = next;
        }
        boolean refitting = refit != null && grid.axis() == 1 && grid.groupSize() > 0 && !actOrder;
        if (refit != null && grid.axis() == 1 && grid.groupSize() > 0 && actOrder) {
            warnings.add("activation order with groups: group scales fixed from the original weights");
        }
        int gs = grid.groupSize();
        int qmin = grid.qmin();
        int qmax = grid.qmax();
        int[] codes = new int[rows * cols];
        int blocks = (cols + blockSize - 1) / blockSize;
        double[] lossHistory = new double[blocks];
        double loss = 0;
        float[] err = new float[rows];
        float[] buf = new float[Math.max(gs, 1)];
        float[] errBlock = new float[Math.min(blockSize, cols) * rows];
        for (int b = 0; b < blocks; b++) {
            Progress.checkInterrupted(task);
            int j1 = b * blockSize;
            int count = Math.min(blockSize, cols - j1);
            float[][] w1 = new float[count][];
            for (int k = 0; k < count; k++) {
                w1[k] = Arrays.copyOfRange(wt, (j1 + k) * rows, (j1 + k + 1) * rows);
            }
            for (int k = 0; k < count; k++) {
                int j = j1 + k;
                int orig = perm[j];
                if (refitting && orig % gs == 0) {
                    for (int r = 0; r < rows; r++) {
                        for (int c = 0; c < gs; c++) {
                            int col = orig + c;
                            buf[c] = col < j1 + count ? w1[col - j1][r] : wt[col * rows + r];
                        }
                        int seg = grid.segmentOf(r * cols + orig);
                        float[] p = refit.fit(buf, 0, gs);
                        if (p == null || p.length < 2 || !(p[0] > 0) || !Float.isFinite(p[0])
                                || !Float.isFinite(p[1])) {
                            throw new IllegalStateException(task + ": the refitted grid of segment " + seg + " is "
                                    + Arrays.toString(p) + "; need a positive finite scale and a finite zero point");
                        }
                        scales[seg] = p[0];
                        zps[seg] = p[1];
                    }
                }
                double d = u[j * cols + j];
                float[] cw = w1[k];
                for (int r = 0; r < rows; r++) {
                    int flat = r * cols + orig;
                    int seg = grid.segmentOf(flat);
                    double s = scales[seg];
                    double z = zps[seg];
                    double c = Math.rint(cw[r] / s + z);
                    c = c < qmin ? qmin : (c > qmax ? qmax : c);
                    codes[flat] = (int) c;
                    float q = (float) (s * (c - z));
                    double e = (cw[r] - (double) q) / d;
                    err[r] = (float) e;
                    loss += 0.5 * e * e;
                }
                int urow = j * cols;
                for (int kk = k + 1; kk < count; kk++) {
                    LinearAlgebra.axpy(rows, (float) -u[urow + j1 + kk], err, w1[kk]);
                }
                System.arraycopy(err, 0, errBlock, k * rows, rows);
            }
            int rest = cols - j1 - count;
            if (rest > 0) {
                // Later columns: W^T[j2:, :] -= U[j1:j2, j2:]^T * E, E = the block's scaled errors (count x rows).
                float[] ub = new float[count * rest];
                for (int k = 0; k < count; k++) {
                    int src = (j1 + k) * cols + j1 + count;
                    for (int c = 0; c < rest; c++) {
                        ub[k * rest + c] = (float) u[src + c];
                    }
                }
                la.sgemm(true, false, rest, rows, count, -1f, ub, 0, rest, errBlock, 0, rows, 1f, wt,
                        (j1 + count) * rows, rows);
            }
            lossHistory[b] = loss;
            progress.update(task, b + 1, blocks, loss);
        }
        return new Outcome(codes, lossHistory, warnings, share);
    }

    private static boolean finite(double[] a) {
        for (double v : a) {
            if (!Double.isFinite(v)) {
                return false;
            }
        }
        return true;
    }

    static String fmt(double share) {
        return String.format(Locale.ROOT, "%.4g%%", share * 100);
    }
}
