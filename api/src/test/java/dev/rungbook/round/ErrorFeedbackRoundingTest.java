package dev.rungbook.round;

import static dev.rungbook.round.LearnedRoundingFixtures.correlatedInputs;
import static dev.rungbook.round.LearnedRoundingFixtures.gaussian;
import static dev.rungbook.round.LearnedRoundingFixtures.nearest;
import static dev.rungbook.round.LearnedRoundingFixtures.outputError;
import static dev.rungbook.round.LearnedRoundingFixtures.perRowGrid;
import static dev.rungbook.round.LearnedRoundingFixtures.tensor;
import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.progress.OperationInterruptedException;
import dev.rungbook.progress.Progress;
import dev.rungbook.tensor.Tensor;
import java.util.ArrayList;
import java.util.List;
import org.apache.commons.math3.linear.Array2DRowRealMatrix;
import org.apache.commons.math3.linear.CholeskyDecomposition;
import org.apache.commons.math3.linear.RealMatrix;
import org.junit.jupiter.api.Test;

/** Error-feedback rounding against a direct double-precision implementation of the published procedure. */
class ErrorFeedbackRoundingTest {
    /**
     * The published procedure written out plainly (check-values.md section 12): double precision, one column at a
     * time, no blocks, inverse and Cholesky factor by commons-math3.
     */
    static int[] reference(float[] w0, int rows, int cols, float[] x, int n, GridAssignment g, double damp) {
        double[][] h = new double[cols][cols];
        for (int i = 0; i < n; i++) {
            for (int a = 0; a < cols; a++) {
                for (int b = 0; b < cols; b++) {
                    h[a][b] += 2.0 * x[i * cols + a] * x[i * cols + b] / n;
                }
            }
        }
        double[][] w = new double[rows][cols];
        for (int r = 0; r < rows; r++) {
            for (int j = 0; j < cols; j++) {
                w[r][j] = w0[r * cols + j];
            }
        }
        for (int j = 0; j < cols; j++) {
            if (h[j][j] == 0) {
                h[j][j] = 1;
                for (int r = 0; r < rows; r++) {
                    w[r][j] = 0;
                }
            }
        }
        double mean = 0;
        for (int j = 0; j < cols; j++) {
            mean += h[j][j] / cols;
        }
        for (int j = 0; j < cols; j++) {
            h[j][j] += damp * mean;
        }
        RealMatrix inv = new CholeskyDecomposition(new Array2DRowRealMatrix(h), 1e-9, 1e-14).getSolver()
                .getInverse();
        RealMatrix u = new CholeskyDecomposition(inv, 1e-9, 1e-14).getLT(); // H^-1 = U^T U
        int[] codes = new int[rows * cols];
        for (int j = 0; j < cols; j++) {
            double d = u.getEntry(j, j);
            for (int r = 0; r < rows; r++) {
                int flat = r * cols + j;
                int c = g.nearestCode(flat, w[r][j]);
                codes[flat] = c;
                double e = (w[r][j] - g.value(flat, c)) / d;
                for (int k = j + 1; k < cols; k++) {
                    w[r][k] -= e * u.getEntry(j, k);
                }
            }
        }
        return codes;
    }

    private static int mismatches(int[] a, int[] b) {
        int m = 0;
        for (int i = 0; i < a.length; i++) {
            m += a[i] != b[i] ? 1 : 0;
        }
        return m;
    }

    @Test
    void matchesTheDirectImplementationOfThePublishedProcedure() {
        int rows = 24;
        int cols = 40;
        int n = 200;
        float[] w = gaussian(21, rows * cols, 1.0);
        float[] x = correlatedInputs(22, n, cols, 12);
        GridAssignment g = perRowGrid(w, rows, cols, 4);
        Tensor wt = tensor(w, rows, cols);
        Calibration cal = Calibration.of(tensor(x, n, cols));
        // Source: the published GPTQ procedure (check-values.md section 12), in double with commons-math3.
        int[] expected = reference(w, rows, cols, x, n, g, 0.01);
        for (int block : new int[] {128, 7, 1}) {
            int[] got = ErrorFeedbackRounding.of(cal).blockSize(block).codes(wt, g, Progress.silent());
            // float32 kernel vs double reference: a code may flip where a value sits within rounding of a tie.
            assertTrue(mismatches(expected, got) <= rows * cols / 200, "block " + block + ": "
                    + mismatches(expected, got) + " of " + rows * cols + " codes differ");
        }
    }

    @Test
    void activationOrderPermutesAndRestoresColumns() {
        int rows = 8;
        int cols = 16;
        int n = 100;
        float[] w = gaussian(31, rows * cols, 1.0);
        float[] x = correlatedInputs(32, n, cols, 16);
        // Make the column scales very different so that the order is not the natural one.
        for (int i = 0; i < n; i++) {
            for (int j = 0; j < cols; j++) {
                x[i * cols + j] *= 1 + ((j * 5) % cols);
            }
        }
        GridAssignment g = perRowGrid(w, rows, cols, 3);
        Calibration cal = Calibration.of(tensor(x, n, cols));
        // The reference run on permuted columns, with the codes put back in original order.
        double[] diag = new double[cols];
        for (int i = 0; i < n; i++) {
            for (int j = 0; j < cols; j++) {
                diag[j] += x[i * cols + j] * (double) x[i * cols + j];
            }
        }
        Integer[] order = new Integer[cols];
        for (int j = 0; j < cols; j++) {
            order[j] = j;
        }
        java.util.Arrays.sort(order, (a, b) -> Double.compare(diag[b], diag[a]));
        float[] wp = new float[w.length];
        float[] xp = new float[x.length];
        float[] sp = g.scales();
        for (int j = 0; j < cols; j++) {
            for (int r = 0; r < rows; r++) {
                wp[r * cols + j] = w[r * cols + order[j]];
            }
            for (int i = 0; i < n; i++) {
                xp[i * cols + j] = x[i * cols + order[j]];
            }
        }
        GridAssignment gp = GridAssignment.of(new int[] {rows, cols}, 0, 0, g.qmin(), g.qmax(), sp, g.zeroPoints());
        int[] permuted = reference(wp, rows, cols, xp, n, gp, 0.01);
        int[] expected = new int[w.length];
        for (int j = 0; j < cols; j++) {
            for (int r = 0; r < rows; r++) {
                expected[r * cols + order[j]] = permuted[r * cols + j];
            }
        }
        int[] got = ErrorFeedbackRounding.of(cal).activationOrder(true).codes(tensor(w, rows, cols), g,
                Progress.silent());
        assertTrue(mismatches(expected, got) <= 1, mismatches(expected, got) + " codes differ");
    }

    @Test
    void deadInputsAreZeroedAndReported() {
        int rows = 4;
        int cols = 6;
        int n = 30;
        float[] w = gaussian(41, rows * cols, 1.0);
        float[] x = correlatedInputs(42, n, cols, 6);
        for (int i = 0; i < n; i++) {
            x[i * cols + 2] = 0f; // input 2 never fires
        }
        GridAssignment g = perRowGrid(w, rows, cols, 4);
        RoundingRun run = ErrorFeedbackRounding.of(Calibration.of(tensor(x, n, cols))).run(tensor(w, rows, cols), g,
                Progress.silent());
        for (int r = 0; r < rows; r++) {
            assertEquals(0, run.codes()[r * cols + 2], "dead input weight of row " + r + " is zero");
        }
        assertTrue(run.warnings().get(0).startsWith("1 of 6 inputs are zero"), run.warnings().toString());
        assertArrayEquals(reference(w, rows, cols, x, n, g, 0.01), run.codes());
    }

    @Test
    void singularHessianRaisesDampingAndSaysSo() {
        int rows = 3;
        int cols = 4;
        int n = 20;
        float[] w = gaussian(51, rows * cols, 1.0);
        float[] x = new float[n * cols];
        float[] base = gaussian(52, n, 1.0);
        for (int i = 0; i < n; i++) {
            for (int j = 0; j < cols; j++) {
                x[i * cols + j] = base[i]; // four identical inputs: rank-one H
            }
        }
        GridAssignment g = perRowGrid(w, rows, cols, 4);
        RoundingRun run = ErrorFeedbackRounding.of(Calibration.of(tensor(x, n, cols))).damping(0)
                .run(tensor(w, rows, cols), g, Progress.silent());
        assertTrue(run.warnings().stream().anyMatch(s -> s.startsWith("damping raised from 0.000%")),
                run.warnings().toString());
        for (int c : run.codes()) {
            assertTrue(c >= g.qmin() && c <= g.qmax());
        }
        for (double l : run.lossHistory()) {
            assertTrue(Double.isFinite(l));
        }
    }

    @Test
    void refittedGroupsUseTheUpdatedWeights() {
        int rows = 6;
        int cols = 32;
        int n = 120;
        int gs = 8;
        float[] w = gaussian(61, rows * cols, 1.0);
        float[] x = correlatedInputs(62, n, cols, 10);
        int qmax = 7;
        int groups = rows * cols / gs;
        float[] s = new float[groups];
        for (int r = 0; r < rows; r++) {
            for (int k = 0; k < cols / gs; k++) {
                double m = 0;
                for (int c = 0; c < gs; c++) {
                    m = Math.max(m, Math.abs(w[r * cols + k * gs + c]));
                }
                s[r * (cols / gs) + k] = (float) (m / qmax);
            }
        }
        GridAssignment g = GridAssignment.of(new int[] {rows, cols}, 1, gs, -8, 7, s, new float[groups]);
        List<float[]> seen = new ArrayList<>();
        SegmentRefit minMax = (v, from, to) -> {
            seen.add(java.util.Arrays.copyOfRange(v, from, to));
            double m = 0;
            for (int i = from; i < to; i++) {
                m = Math.max(m, Math.abs(v[i]));
            }
            return new float[] {(float) (m / qmax), 0f};
        };
        float[] scales = g.scales();
        float[] zps = g.zeroPoints();
        ErrorFeedbackRounding rule = ErrorFeedbackRounding.of(Calibration.of(tensor(x, n, cols))).blockSize(16);
        int[] codes = rule.codes(tensor(w, rows, cols), g, minMax, scales, zps, Progress.silent());
        assertEquals(groups, seen.size(), "one refit per group and row");
        // The first group of every row is fitted before any feedback: it sees the original weights.
        assertArrayEquals(java.util.Arrays.copyOfRange(w, 0, gs), seen.get(0));
        assertEquals(s[0], scales[0], 0f);
        // Later groups see weights moved by feedback, so their scales change.
        int changed = 0;
        for (int i = 0; i < groups; i++) {
            changed += scales[i] != s[i] ? 1 : 0;
        }
        assertTrue(changed >= groups / 2, changed + " of " + groups + " scales refitted");
        // The codes, read with the refitted scales, beat nearest on the fixed grid.
        GridAssignment refitted = GridAssignment.of(new int[] {rows, cols}, 1, gs, -8, 7, scales, zps);
        double ef = outputError(w, refitted, codes, rows, cols, x, n);
        double near = outputError(w, g, nearest(g, w), rows, cols, x, n);
        assertTrue(ef < near, "error feedback " + ef + " vs nearest " + near);
    }

    @Test
    void checksInterruptionEveryBlock() {
        int rows = 4;
        int cols = 64;
        float[] w = gaussian(71, rows * cols, 1.0);
        float[] x = correlatedInputs(72, 80, cols, 8);
        GridAssignment g = perRowGrid(w, rows, cols, 4);
        ErrorFeedbackRounding rule = ErrorFeedbackRounding.of(Calibration.of(tensor(x, 80, cols))).blockSize(8);
        List<Long> steps = new ArrayList<>();
        Progress stopAtThree = (task, done, total, loss) -> {
            steps.add(done);
            if (done == 3) {
                Thread.currentThread().interrupt();
            }
        };
        try {
            assertThrows(OperationInterruptedException.class, () -> rule.codes(tensor(w, rows, cols), g, stopAtThree));
        } finally {
            Thread.interrupted();
        }
        assertEquals(List.of(1L, 2L, 3L), steps);
    }

    @Test
    void refusesMismatchedShapesNamingBoth() {
        Calibration cal = Calibration.of(Tensor.of(new float[512 * 70], 512, 70));
        Tensor w = Tensor.of(new float[64 * 72], 64, 72);
        GridAssignment g = GridAssignment.of(new int[] {64, 72}, -1, 0, -8, 7, new float[] {1f}, new float[] {0f});
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                () -> ErrorFeedbackRounding.of(cal).codes(w, g, Progress.silent()));
        assertTrue(e.getMessage().contains("weight [64, 72] vs inputs [512, 70]"), e.getMessage());
    }

    @Test
    void specIsImmutableWithDefaultsAsPublished() {
        Calibration cal = Calibration.of(Tensor.of(new float[] {1, 2, 3, 4}, 2, 2));
        ErrorFeedbackRounding r = ErrorFeedbackRounding.of(cal);
        // Source: GPTQ defaults, 1% damping and blocks of 128 (check-values.md section 12).
        assertEquals(0.01, r.damping());
        assertEquals(128, r.blockSize());
        ErrorFeedbackRounding r2 = r.damping(0.1).activationOrder(true);
        assertEquals(0.01, r.damping());
        assertEquals(0.1, r2.damping());
        assertEquals(r, ErrorFeedbackRounding.of(cal));
        assertEquals("error-feedback(damping=0.01, block=128)", r.label());
        assertThrows(IllegalArgumentException.class, () -> r.damping(-1));
        assertThrows(IllegalArgumentException.class, () -> r.blockSize(0));
    }
}
