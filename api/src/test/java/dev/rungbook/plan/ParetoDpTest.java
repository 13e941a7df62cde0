package dev.rungbook.plan;

import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertFalse;
import static org.junit.jupiter.api.Assertions.assertNull;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.progress.Progress;
import dev.rungbook.testing.Fixtures;
import java.util.ArrayList;
import java.util.List;
import java.util.Random;
import org.junit.jupiter.api.Test;

class ParetoDpTest {
    /** Every full assignment of one option per layer (options with negative bytes skipped): bytes, cost, choices. */
    private static List<Object[]> enumerate(long[][] bytes, double[][] cost) {
        List<Object[]> out = new ArrayList<>();
        enumerate(bytes, cost, 0, new int[bytes.length], 0, 0, out);
        return out;
    }

    private static void enumerate(long[][] bytes, double[][] cost, int l, int[] choice, long b, double c,
            List<Object[]> out) {
        if (l == bytes.length) {
            out.add(new Object[] {b, c, choice.clone()});
            return;
        }
        for (int o = 0; o < bytes[l].length; o++) {
            if (bytes[l][o] >= 0) {
                choice[l] = o;
                enumerate(bytes, cost, l + 1, choice, b + bytes[l][o], c + cost[l][o], out);
            }
        }
    }

    private static long[][] randomBytes(Random r, int layers, int options, boolean holes) {
        long[][] b = new long[layers][options];
        for (int l = 0; l < layers; l++) {
            for (int o = 0; o < options; o++) {
                b[l][o] = holes && o > 0 && r.nextInt(5) == 0 ? -1 : 1 + r.nextInt(40);
            }
        }
        return b;
    }

    private static double[][] randomCost(Random r, int layers, int options, boolean integral) {
        double[][] c = new double[layers][options];
        for (int l = 0; l < layers; l++) {
            for (int o = 0; o < options; o++) {
                // Integral costs force many exact ties; negative values occur for accuracy drops.
                c[l][o] = integral ? r.nextInt(7) - 1 : r.nextDouble() * 3 - 0.2;
            }
        }
        return c;
    }

    @Test
    void bestUnderEveryBudgetEqualsBruteForce() {
        // Source: exhaustive enumeration of every assignment (at most 5^6 = 15625 per problem).
        Random r = Fixtures.random(2024);
        for (int trial = 0; trial < 60; trial++) {
            int layers = 1 + r.nextInt(6);
            int options = 1 + r.nextInt(5);
            long[][] bytes = randomBytes(r, layers, options, trial % 2 == 0);
            double[][] cost = randomCost(r, layers, options, trial % 3 == 0);
            ParetoDp dp = ParetoDp.solve(bytes, cost, 1_000_000, Progress.silent());
            assertTrue(dp.exact());
            List<Object[]> all = enumerate(bytes, cost);
            long max = 0;
            for (Object[] a : all) {
                max = Math.max(max, (long) a[0]);
            }
            for (long budget = 0; budget <= max + 1; budget++) {
                double bruteBest = Double.POSITIVE_INFINITY;
                for (Object[] a : all) {
                    if ((long) a[0] <= budget) {
                        bruteBest = Math.min(bruteBest, (double) a[1]);
                    }
                }
                ParetoDp.Point p = dp.best(budget);
                if (bruteBest == Double.POSITIVE_INFINITY) {
                    assertNull(p, "trial " + trial + " budget " + budget);
                    continue;
                }
                assertTrue(p.bytes() <= budget, "trial " + trial + " budget " + budget);
                assertEquals(bruteBest, p.cost(), 1e-9, "trial " + trial + " budget " + budget);
                // The reported choices really add up to the reported bytes and cost.
                long b = 0;
                double c = 0;
                int[] ch = p.choices();
                for (int l = 0; l < layers; l++) {
                    assertTrue(bytes[l][ch[l]] >= 0);
                    b += bytes[l][ch[l]];
                    c += cost[l][ch[l]];
                }
                assertEquals(p.bytes(), b);
                assertEquals(p.cost(), c, 1e-9);
            }
        }
    }

    @Test
    void frontierEqualsTheBruteForceParetoSet() {
        // Source: the definition of Pareto dominance applied to every enumerated assignment.
        Random r = Fixtures.random(99);
        for (int trial = 0; trial < 40; trial++) {
            int layers = 1 + r.nextInt(5);
            int options = 1 + r.nextInt(4);
            long[][] bytes = randomBytes(r, layers, options, true);
            double[][] cost = randomCost(r, layers, options, trial % 2 == 0);
            List<Object[]> all = enumerate(bytes, cost);
            List<double[]> expected = new ArrayList<>();
            for (Object[] a : all) {
                long ab = (long) a[0];
                double ac = (double) a[1];
                boolean dominated = false;
                for (Object[] o : all) {
                    long ob = (long) o[0];
                    double oc = (double) o[1];
                    if (ob <= ab && oc <= ac + 1e-12 && (ob < ab || oc < ac - 1e-12)) {
                        dominated = true;
                        break;
                    }
                }
                boolean seen = false;
                for (double[] e : expected) {
                    seen |= e[0] == ab && Math.abs(e[1] - ac) <= 1e-12;
                }
                if (!dominated && !seen) {
                    expected.add(new double[] {ab, ac});
                }
            }
            expected.sort((x, y) -> Double.compare(x[0], y[0]));
            List<ParetoDp.Point> got = ParetoDp.solve(bytes, cost, 1_000_000, Progress.silent()).points();
            assertEquals(expected.size(), got.size(), "trial " + trial);
            for (int i = 0; i < got.size(); i++) {
                assertEquals(expected.get(i)[0], got.get(i).bytes(), 0.0, "trial " + trial);
                assertEquals(expected.get(i)[1], got.get(i).cost(), 1e-9, "trial " + trial);
            }
        }
    }

    @Test
    void lagrangianSolutionsLieOnTheFrontier() {
        // Source: for any multiplier lambda >= 0, choosing per layer the option minimising cost + lambda * bytes
        // minimises the total cost + lambda * bytes, so its (bytes, cost) is a supported point of the exact frontier
        // (a classical property of Lagrangian relaxation; the sweep is computed independently of the DP here).
        Random r = Fixtures.random(5);
        for (int trial = 0; trial < 20; trial++) {
            int layers = 2 + r.nextInt(6);
            long[][] bytes = randomBytes(r, layers, 4, false);
            double[][] cost = randomCost(r, layers, 4, false);
            List<ParetoDp.Point> front = ParetoDp.solve(bytes, cost, 1_000_000, Progress.silent()).points();
            for (double lambda : new double[] {0, 0.001, 0.01, 0.03, 0.1, 0.3, 1, 10}) {
                long b = 0;
                double c = 0;
                for (int l = 0; l < layers; l++) {
                    int best = 0;
                    for (int o = 1; o < 4; o++) {
                        double v = cost[l][o] + lambda * bytes[l][o];
                        double w = cost[l][best] + lambda * bytes[l][best];
                        if (v < w || (v == w && bytes[l][o] < bytes[l][best])) {
                            best = o;
                        }
                    }
                    b += bytes[l][best];
                    c += cost[l][best];
                }
                double lagrangian = c + lambda * b;
                double frontierBest = Double.POSITIVE_INFINITY;
                for (ParetoDp.Point p : front) {
                    frontierBest = Math.min(frontierBest, p.cost() + lambda * p.bytes());
                }
                assertEquals(frontierBest, lagrangian, 1e-9, "trial " + trial + " lambda " + lambda);
            }
        }
    }

    @Test
    void thinningKeepsPlansFeasibleAndSaysSo() {
        Random r = Fixtures.random(31);
        long[][] bytes = randomBytes(r, 8, 5, false);
        double[][] cost = randomCost(r, 8, 5, false);
        ParetoDp thin = ParetoDp.solve(bytes, cost, 8, Progress.silent());
        ParetoDp full = ParetoDp.solve(bytes, cost, 1_000_000, Progress.silent());
        assertFalse(thin.exact());
        assertTrue(thin.bucketBytes() > 1);
        assertTrue(full.exact());
        for (long budget = 8; budget <= 320; budget += 7) {
            ParetoDp.Point p = thin.best(budget);
            ParetoDp.Point q = full.best(budget);
            if (p != null) {
                assertTrue(p.bytes() <= budget);
                assertTrue(p.cost() >= q.cost() - 1e-12, "a thinned frontier cannot beat the exact one");
            }
        }
    }

    @Test
    void refusesMalformedProblems() {
        assertThrows(IllegalArgumentException.class,
                () -> ParetoDp.solve(new long[][] {{-1, -1}}, new double[][] {{0, 0}}, 10, Progress.silent()));
        assertThrows(IllegalArgumentException.class,
                () -> ParetoDp.solve(new long[][] {{1}}, new double[][] {{Double.NaN}}, 10, Progress.silent()));
        assertThrows(IllegalArgumentException.class,
                () -> ParetoDp.solve(new long[][] {{1}}, new double[][] {{1, 2}}, 10, Progress.silent()));
        ParetoDp one = ParetoDp.solve(new long[][] {{3, 5}}, new double[][] {{2, 1}}, 10, Progress.silent());
        assertArrayEquals(new int[] {1}, one.best(5).choices());
        assertArrayEquals(new int[] {0}, one.best(4).choices());
        assertNull(one.best(2));
    }
}
