package dev.rungbook.round;

import static dev.rungbook.round.LearnedRoundingFixtures.bruteForceBest;
import static dev.rungbook.round.LearnedRoundingFixtures.correlatedInputs;
import static dev.rungbook.round.LearnedRoundingFixtures.gaussian;
import static dev.rungbook.round.LearnedRoundingFixtures.nearest;
import static dev.rungbook.round.LearnedRoundingFixtures.outputError;
import static dev.rungbook.round.LearnedRoundingFixtures.perRowGrid;
import static dev.rungbook.round.LearnedRoundingFixtures.tensor;
import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertFalse;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.progress.Progress;
import dev.rungbook.quant.Quantized;
import dev.rungbook.quant.Quantizer;
import dev.rungbook.tensor.Tensor;
import java.util.ArrayList;
import java.util.List;
import org.junit.jupiter.api.Test;

/** Learned rounding against the exhaustive optimum on tiny layers, and against nearest on larger ones. */
class LearnedRoundingTest {
    @Test
    void tinyLayersNoWorseThanNearestAndCloseToTheBruteForceOptimum() {
        int rows = 2;
        int cols = 8;
        int n = 128;
        StringBuilder log = new StringBuilder();
        double worstAdaptive = 0;
        double worstBare = 0;
        double worstFeedback = 0;
        for (long seed = 1; seed <= 6; seed++) {
            float[] w = gaussian(seed, rows * cols, 0.5);
            float[] x = correlatedInputs(100 + seed, n, cols, 8);
            GridAssignment g = perRowGrid(w, rows, cols, 4);
            Calibration cal = Calibration.of(tensor(x, n, cols));
            Tensor wt = tensor(w, rows, cols);
            // Source: exhaustive search over all 2^16 up/down roundings (the definition of the optimum).
            double opt = bruteForceBest(w, g, rows, cols, x, n);
            double near = outputError(w, g, nearest(g, w), rows, cols, x, n);
            double ef = outputError(w, g, ErrorFeedbackRounding.of(cal).activationOrder(true)
                    .codes(wt, g, Progress.silent()), rows, cols, x, n);
            double bare = outputError(w, g, AdaptiveRounding.of(cal).seed(seed).polish(false)
                    .codes(wt, g, Progress.silent()), rows, cols, x, n);
            double ada = outputError(w, g, AdaptiveRounding.of(cal).seed(seed).codes(wt, g, Progress.silent()), rows,
                    cols, x, n);
            log.append(String.format("seed %d: optimum %.5g nearest %.5g error-feedback %.5g adaptive (published) "
                    + "%.5g (%.3fx) adaptive (with flip search) %.5g (%.3fx)%n", seed, opt, near, ef, bare, bare / opt,
                    ada, ada / opt));
            assertTrue(ef <= near * (1 + 1e-9), "error feedback worse than nearest:\n" + log);
            assertTrue(bare <= near * (1 + 1e-9), "adaptive (published) worse than nearest:\n" + log);
            assertTrue(ada <= bare * (1 + 1e-12), "the flip search raised the error:\n" + log);
            worstAdaptive = Math.max(worstAdaptive, ada / opt);
            worstBare = Math.max(worstBare, bare / opt);
            worstFeedback = Math.max(worstFeedback, ef / opt);
        }
        System.out.print(log);
        // Error feedback (activation order) may beat the up/down optimum: it can move a weight by more than a step.
        assertTrue(worstFeedback <= 1.25, "error feedback within 25% of the optimum:\n" + log);
        // The target, met with the flip search (the published method alone measured 1.0-1.9x here; logged).
        assertTrue(worstAdaptive <= 1.05, "adaptive within 5% of the optimum:\n" + log);
        assertTrue(worstBare <= 2.0, "the published method within a factor 2 of the optimum:\n" + log);
    }

    @Test
    void withTheFlipSearchWithin5PercentOfTheOptimumOnOtherTinyShapesAndBits() {
        // rows x cols, bits: a single row of 16 (pair moves), a 4 x 4 layer, 3 and 2 bits.
        int[][] cases = {{1, 16, 3}, {4, 4, 3}, {2, 8, 2}, {1, 16, 4}};
        StringBuilder log = new StringBuilder();
        double worst = 0;
        for (int c = 0; c < cases.length; c++) {
            int rows = cases[c][0];
            int cols = cases[c][1];
            int n = 96;
            long seed = 40 + c;
            float[] w = gaussian(seed, rows * cols, 0.5);
            float[] x = correlatedInputs(140 + seed, n, cols, Math.max(2, cols / 2));
            GridAssignment g = perRowGrid(w, rows, cols, cases[c][2]);
            Calibration cal = Calibration.of(tensor(x, n, cols));
            Tensor wt = tensor(w, rows, cols);
            // Source: exhaustive search over all 2^16 up/down roundings (the definition of the optimum).
            double opt = bruteForceBest(w, g, rows, cols, x, n);
            double near = outputError(w, g, nearest(g, w), rows, cols, x, n);
            double bare = outputError(w, g, AdaptiveRounding.of(cal).polish(false).codes(wt, g, Progress.silent()),
                    rows, cols, x, n);
            double ada = outputError(w, g, AdaptiveRounding.of(cal).codes(wt, g, Progress.silent()), rows, cols, x,
                    n);
            log.append(String.format("%d x %d, %d bits: optimum %.5g nearest %.5g adaptive (published) %.5g (%.3fx) "
                    + "with flip search %.5g (%.3fx)%n", rows, cols, cases[c][2], opt, near, bare, bare / opt, ada,
                    ada / opt));
            assertTrue(ada <= near * (1 + 1e-9), log.toString());
            assertTrue(ada <= bare * (1 + 1e-12), log.toString());
            worst = Math.max(worst, ada / opt);
        }
        System.out.print(log);
        assertTrue(worst <= 1.05, "within 5% of the optimum:\n" + log);
    }

    @Test
    void theFlipSearchNeverRaisesTheOutputError() {
        // Bias and ReLU (pre-activation search, kept only if the after-activation error is not higher), per-group and
        // asymmetric grids, rows longer than the pair-move limit; the error is measured independently in double.
        StringBuilder log = new StringBuilder();
        int improved = 0;
        for (int c = 0; c < 6; c++) {
            int rows = 6;
            int cols = c < 3 ? 24 : 96;
            int n = 160;
            boolean relu = c % 2 == 1;
            float[] w = gaussian(200 + c, rows * cols, 0.5);
            float[] x = correlatedInputs(300 + c, n, cols, 6);
            float[] b = relu ? gaussian(400 + c, rows, 0.3) : null;
            Calibration cal = Calibration.of(tensor(x, n, cols));
            if (b != null) {
                cal = cal.withBias(tensor(b, rows)).followedBy(Calibration.Activation.RELU);
            }
            Quantizer base = c % 3 == 0 ? Quantizer.linear(3).perGroup(1, 8)
                    : c % 3 == 1 ? Quantizer.linear(4).asymmetric().perChannel(0) : Quantizer.linear(3).perChannel(0);
            Tensor wt = tensor(w, rows, cols).withName("layer" + c);
            AdaptiveRounding rule = AdaptiveRounding.of(cal).iterations(300).learningRate(1e-2).seed(c);
            double[] withSearch = toDouble(base.rounding(rule).apply(wt).dequantized().toFloatArray());
            double[] without = toDouble(base.rounding(rule.polish(false)).apply(wt).dequantized().toFloatArray());
            double e1 = outputError(w, withSearch, rows, cols, x, n, b, relu);
            double e0 = outputError(w, without, rows, cols, x, n, b, relu);
            log.append(String.format("case %d (%s, %d cols%s): published %.6g, with flip search %.6g%n", c,
                    base.label(), cols, relu ? ", bias + ReLU" : "", e0, e1));
            assertTrue(e1 <= e0 * (1 + 1e-6), log.toString());
            if (e1 < e0 * (1 - 1e-6)) {
                improved++;
            }
        }
        System.out.print(log);
        assertTrue(improved >= 3, "the search should find lower errors in most cases:\n" + log);
    }

    @Test
    void sameBitsOnOneThreadAsOnSeveral() throws Exception {
        // 256 x 512: the element pass runs in two blocks of 128 rows, in parallel on the common pool; in a pool of
        // one thread the same blocks run one after the other and must give the same bits.
        int rows = 256;
        int cols = 512;
        int n = 192;
        float[] w = gaussian(131, rows * cols, 0.05);
        float[] x = correlatedInputs(132, n, cols, 16);
        GridAssignment g = perRowGrid(w, rows, cols, 4);
        AdaptiveRounding rule = AdaptiveRounding.of(Calibration.of(tensor(x, n, cols))).iterations(60)
                .warmup(0.5);
        assertEquals(128, AdaptiveObjective.blockRows(rows, cols));
        RoundingRun many = rule.run(tensor(w, rows, cols), g, Progress.silent());
        java.util.concurrent.ForkJoinPool one = new java.util.concurrent.ForkJoinPool(1);
        try {
            RoundingRun single = one.submit(() -> rule.run(tensor(w, rows, cols), g, Progress.silent())).get();
            assertArrayEquals(many.lossHistory(), single.lossHistory());
            assertArrayEquals(many.undecidedHistory(), single.undecidedHistory());
            assertArrayEquals(many.codes(), single.codes());
        } finally {
            one.shutdown();
        }
    }

    @Test
    void nearestIsBeatenWhereItIsKnownToBeSuboptimal() {
        // Two perfectly correlated inputs (x1 = x2) and weights 0.45 and 0.35 steps above a grid point: nearest
        // rounds both down, so the output error is (0.8 s)^2 E[x^2]; rounding one of them up leaves (0.2 s)^2 E[x^2].
        // (Exactly equal weights would be a tie that a gradient method, moving both alike, cannot break.)
        int n = 64;
        float[] base = gaussian(5, n, 1.0);
        float[] x = new float[2 * n];
        for (int i = 0; i < n; i++) {
            x[2 * i] = base[i];
            x[2 * i + 1] = base[i];
        }
        float s = 0.25f;
        float[] w = {2.45f * s, 2.35f * s};
        GridAssignment g = GridAssignment.of(new int[] {1, 2}, -1, 0, -8, 7, new float[] {s}, new float[] {0f});
        Calibration cal = Calibration.of(tensor(x, n, 2));
        Tensor wt = tensor(w, 1, 2);
        double ex2 = 0;
        for (float v : base) {
            ex2 += v * (double) v / n;
        }
        double near = outputError(w, g, nearest(g, w), 1, 2, x, n);
        // Source: worked by hand from the definition of the output error.
        assertEquals(0.64 * s * s * ex2, near, 1e-6);
        assertEquals(0.04 * s * s * ex2, bruteForceBest(w, g, 1, 2, x, n), 1e-6);
        for (LayerRounding rule : List.of(ErrorFeedbackRounding.of(cal), AdaptiveRounding.of(cal))) {
            int[] c = rule.codes(wt, g, Progress.silent());
            assertEquals(5, c[0] + c[1], rule.label() + ": one up (3) and one down (2), got "
                    + java.util.Arrays.toString(c));
            assertEquals(0.04 * s * s * ex2, outputError(w, g, c, 1, 2, x, n), 1e-6, rule.label());
        }
    }

    @Test
    void bothRulesBeatNearestOnRandom256By256LayersAt4And3Bits() {
        int rows = 256;
        int cols = 256;
        int n = 512;
        float[] w = gaussian(81, rows * cols, 0.05);
        float[] x = correlatedInputs(82, n, cols, 32);
        Calibration cal = Calibration.of(tensor(x, n, cols));
        Tensor wt = tensor(w, rows, cols);
        StringBuilder log = new StringBuilder();
        for (int bits : new int[] {4, 3}) {
            GridAssignment g = perRowGrid(w, rows, cols, bits);
            double near = outputError(w, g, nearest(g, w), rows, cols, x, n);
            double ef = outputError(w, g, ErrorFeedbackRounding.of(cal).codes(wt, g, Progress.silent()), rows, cols,
                    x, n);
            // Fewer iterations than the published 10,000 (test time), with a larger step to make up for it.
            double ada = outputError(w, g, AdaptiveRounding.of(cal).iterations(800).learningRate(1e-2)
                    .codes(wt, g, Progress.silent()), rows, cols, x, n);
            log.append(String.format("%d bits: nearest %.5g error-feedback %.5g adaptive %.5g%n", bits, near, ef,
                    ada));
            assertTrue(ef < near, log.toString());
            assertTrue(ada < near, log.toString());
        }
        System.out.print(log);
    }

    @Test
    void annealingDecidesAtLeast99PercentOfTheWeights() {
        // How many weights the regulariser decides depends on the output error's size against lambda = 0.01: with
        // weights of sd 0.5 / sqrt(fan-in) (step about 0.013) 99% are decided; with sd 1 / sqrt(fan-in) about 2%
        // stay undecided, and on tiny layers with large steps up to 20% (measured; see the report).
        int rows = 8;
        int cols = 256;
        int n = 512;
        float[] w = gaussian(91, rows * cols, 0.5 / Math.sqrt(cols));
        float[] x = correlatedInputs(92, n, cols, 64);
        GridAssignment g = perRowGrid(w, rows, cols, 4);
        Calibration cal = Calibration.of(tensor(x, n, cols));
        AdaptiveRounding rule = AdaptiveRounding.of(cal); // the published schedule, 10,000 iterations
        RoundingRun run = rule.run(tensor(w, rows, cols), g, Progress.silent());
        AdaptiveObjective obj = rule.objective(dev.rungbook.internal.LinearAlgebra.instance(), tensor(w, rows, cols),
                g);
        double[] u = run.undecidedHistory();
        // Source: check-values.md section 7 (annealed regulariser drives h(V) to 0 or 1).
        assertTrue(u[u.length - 1] <= 0.01, "undecided share after annealing " + u[u.length - 1]);
        assertTrue(u[0] > 0.9, "at the start almost every weight is undecided: " + u[0]);
        assertEquals(10_000, run.lossHistory().length);
        assertTrue(obj.rows == rows && obj.cols == cols);
    }

    @Test
    void deterministicForASeedAndDifferentForAnother() {
        int rows = 8;
        int cols = 16;
        int n = 100;
        float[] w = gaussian(101, rows * cols, 0.5);
        float[] x = correlatedInputs(102, n, cols, 8);
        GridAssignment g = perRowGrid(w, rows, cols, 3);
        AdaptiveRounding rule = AdaptiveRounding.of(Calibration.of(tensor(x, n, cols))).iterations(500);
        RoundingRun a = rule.seed(3).run(tensor(w, rows, cols), g, Progress.silent());
        RoundingRun b = rule.seed(3).run(tensor(w, rows, cols), g, Progress.silent());
        RoundingRun c = rule.seed(4).run(tensor(w, rows, cols), g, Progress.silent());
        assertTrue(a.sameOutcome(b));
        assertFalse(java.util.Arrays.equals(a.lossHistory(), c.lossHistory()));
    }

    @Test
    void askingForAHugeIterationCountCostsNoMemoryUntilTheIterationsRun() {
        // The loss histories grow with the work done: 2^31-1 iterations asked, 20 000 done, then an interrupt
        // (before the fix the histories were allocated up front: 16 GiB, an OutOfMemoryError in a kernel).
        float[] w = gaussian(113, 4 * 8, 0.5);
        float[] x = correlatedInputs(114, 64, 8, 4);
        GridAssignment g = perRowGrid(w, 4, 8, 3);
        Progress stop = (task, done, total, loss) -> {
            if (done == 20_000 && total == Integer.MAX_VALUE) {
                Thread.currentThread().interrupt();
            }
        };
        RoundingRun run;
        try {
            run = AdaptiveRounding.of(Calibration.of(tensor(x, 64, 8))).iterations(Integer.MAX_VALUE)
                    .run(tensor(w, 4, 8), g, stop);
        } finally {
            Thread.interrupted();
        }
        assertTrue(run.interrupted());
        assertEquals(20_000, run.steps());
        assertEquals(20_000, run.lossHistory().length);
    }

    @Test
    void interruptionStopsCleanlyWithTheBestStateSoFar() {
        int rows = 8;
        int cols = 16;
        int n = 100;
        float[] w = gaussian(111, rows * cols, 0.5);
        float[] x = correlatedInputs(112, n, cols, 8);
        GridAssignment g = perRowGrid(w, rows, cols, 3);
        List<String> tasks = new ArrayList<>();
        Progress stop = (task, done, total, loss) -> {
            tasks.add(task);
            if (done == 120 && total == 5000) {
                Thread.currentThread().interrupt();
            }
        };
        RoundingRun run;
        try {
            run = AdaptiveRounding.of(Calibration.of(tensor(x, n, cols))).iterations(5000)
                    .run(tensor(w, rows, cols).withName("fc.weight"), g, stop);
            assertTrue(Thread.currentThread().isInterrupted(), "the interrupt flag stays set for the caller");
        } finally {
            Thread.interrupted();
        }
        assertTrue(run.interrupted());
        assertEquals(120, run.steps());
        assertEquals(120, run.lossHistory().length);
        assertTrue(tasks.contains("adaptive rounding fc.weight"));
        assertTrue(tasks.contains("adaptive rounding fc.weight: decided"));
        double near = outputError(w, g, nearest(g, w), rows, cols, x, n);
        double got = outputError(w, g, run.codes(), rows, cols, x, n);
        // The initial state rounds to nearest except at exact halves; the kept state is no worse than it.
        assertTrue(got <= near * (1 + 1e-6), got + " vs nearest " + near);
        assertTrue(run.warnings().get(0).startsWith("interrupted after 120 of 5000"), run.warnings().toString());
    }

    @Test
    void runsInsideAQuantizerOnItsGridPerChannelAndPerGroup() {
        int rows = 12;
        int cols = 32;
        int n = 200;
        float[] w = gaussian(121, rows * cols, 0.5);
        float[] x = correlatedInputs(122, n, cols, 8);
        Calibration cal = Calibration.of(tensor(x, n, cols));
        Tensor wt = tensor(w, rows, cols).withName("fc2.weight");
        List<RoundingRun> runs = new ArrayList<>();
        for (Quantizer base : List.of(Quantizer.linear(4).perChannel(0), Quantizer.linear(3).perGroup(1, 8),
                Quantizer.linear(4).asymmetric().perChannel(0))) {
            for (LayerRounding rule : List.of(Rounding.errorFeedback(cal).onFinish(runs::add),
                    Rounding.adaptive(cal).iterations(600).learningRate(1e-2).onFinish(runs::add))) {
                Quantized q = base.rounding(rule).apply(wt);
                Quantized nearQ = base.apply(wt);
                double[] deqD = toDouble(q.dequantized().toFloatArray());
                double[] nqD = toDouble(nearQ.dequantized().toFloatArray());
                double e = outputError(w, deqD, rows, cols, x, n, null, false);
                double en = outputError(w, nqD, rows, cols, x, n, null, false);
                assertTrue(e < en, base.label() + " with " + rule.label() + ": " + e + " vs nearest " + en);
                if (rule instanceof ErrorFeedbackRounding && base.granularity().toString().contains("group")) {
                    // Error feedback refits each group's scale from the updated weights when it reaches the group,
                    // as published; the first group still sees the original weights.
                    assertEquals(nearQ.scales().getFlat(0), q.scales().getFlat(0));
                } else {
                    // Same scales as nearest: the rule only changed the up/down choices.
                    assertArrayEquals(nearQ.scales().toFloatArray(), q.scales().toFloatArray());
                }
            }
        }
        assertEquals(6, runs.size());
        assertTrue(runs.get(1).lossHistory().length == 600);
    }

    @Test
    void adaptiveSpecDefaultsAreThePublishedOnes() {
        AdaptiveRounding r = AdaptiveRounding.of(Calibration.of(Tensor.of(new float[] {1, 2}, 1, 2)));
        // Source: check-values.md section 7 (zeta/gamma seen; schedule values recalled, not confirmed).
        assertEquals(10_000, r.iterations());
        assertEquals(32, r.batchSize());
        assertEquals(0.01, r.lambda());
        assertEquals(20.0, r.betaStart());
        assertEquals(2.0, r.betaEnd());
        assertEquals(0.2, r.warmup());
        assertEquals(1e-3, r.learningRate());
        assertEquals(20.0, r.betaAt(0));
        assertEquals(20.0, r.betaAt(2000));
        assertEquals(11.0, r.betaAt(6000), 1e-12);
        assertEquals(2.0 + 18.0 / 8000, r.betaAt(9999), 1e-12);
        assertEquals("adaptive(iterations=10000, batch=32, lambda=0.01, beta=20->2, warmup=0.2, lr=0.001, seed=0, "
                + "polish)", r.label());
        // Our flip search is on by default and can be switched off, which leaves the published method alone.
        assertTrue(r.polish());
        assertFalse(r.polish(false).polish());
        assertEquals("adaptive(iterations=10000, batch=32, lambda=0.01, beta=20->2, warmup=0.2, lr=0.001, seed=0)",
                r.polish(false).label());
        assertFalse(r.equals(r.polish(false)));
        assertEquals(r, AdaptiveRounding.of(Calibration.of(Tensor.of(new float[] {1, 2}, 1, 2))));
    }

    private static double[] toDouble(float[] v) {
        double[] d = new double[v.length];
        for (int i = 0; i < v.length; i++) {
            d[i] = v[i];
        }
        return d;
    }
}
