package dev.rungbook.round;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertNotEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.testing.Fixtures;
import java.util.Random;
import org.junit.jupiter.api.Test;

class RoundingTest {
    @Test
    void nearestRoundsTiesToEven() {
        // Source: IEEE 754-2008 roundTiesToEven (as java.lang.Math.rint): 0.5 -> 0, 1.5 -> 2, 2.5 -> 2, -2.5 -> -2.
        ElementRounding r = Rounding.nearest();
        assertEquals(0.0, r.round(0.5, 0));
        assertEquals(2.0, r.round(1.5, 0));
        assertEquals(2.0, r.round(2.5, 0));
        assertEquals(-2.0, r.round(-2.5, 0));
        assertEquals(3.0, r.round(2.5000001, 0));
        assertEquals("nearest-even", r.label());
    }

    @Test
    void tiesAwayRoundsHalvesAwayFromZero() {
        // Source: IEEE 754-2008 roundTiesToAway: 2.5 -> 3, -2.5 -> -3, 0.5 -> 1.
        ElementRounding r = Rounding.nearestTiesAway();
        assertEquals(3.0, r.round(2.5, 0));
        assertEquals(-3.0, r.round(-2.5, 0));
        assertEquals(1.0, r.round(0.5, 0));
        assertEquals(2.0, r.round(2.4999999, 0));
        // the largest double below 0.5: naive floor(x + 0.5) would give 1
        assertEquals(0.0, r.round(Math.nextDown(0.5), 0));
    }

    @Test
    void floorAndCeilRoundTowardInfinities() {
        assertEquals(-3.0, Rounding.floor().round(-2.1, 0));
        assertEquals(2.0, Rounding.floor().round(2.9, 0));
        assertEquals(-2.0, Rounding.ceil().round(-2.9, 0));
        assertEquals(3.0, Rounding.ceil().round(2.1, 0));
    }

    @Test
    void stochasticRoundingIsUnbiasedOverAMillionDraws() {
        // Source: stochastic rounding is unbiased, E[round(x)] = x (check-values "Facts of the trade"). The mean error
        // over 10^6 draws must lie within 3 standard errors of 0; the variance of one draw is f(1 - f).
        ElementRounding r = Rounding.stochastic(42);
        Random rnd = Fixtures.random(7);
        int n = 1_000_000;
        double sum = 0;
        double var = 0;
        for (int i = 0; i < n; i++) {
            double x = rnd.nextDouble() * 8 - 4;
            double f = x - Math.floor(x);
            double q = r.round(x, i);
            assertTrue(q == Math.floor(x) || q == Math.floor(x) + 1, "rounds to a neighbour");
            sum += q - x;
            var += f * (1 - f);
        }
        double mean = sum / n;
        double se = Math.sqrt(var / n) / Math.sqrt(n);
        assertTrue(Math.abs(mean) < 3 * se, "mean error " + mean + " vs 3 standard errors " + 3 * se);
    }

    @Test
    void stochasticRoundingOfOneValueHitsTheUpperNeighbourAtItsFraction() {
        // Source: definition; P(up) = 0.3 for x = 2.3, checked within 3 standard errors over 10^6 indices.
        ElementRounding r = Rounding.stochastic(3);
        int n = 1_000_000;
        int up = 0;
        for (int i = 0; i < n; i++) {
            up += r.round(2.3, i) == 3.0 ? 1 : 0;
        }
        double se = Math.sqrt(0.3 * 0.7 / n);
        assertEquals(0.3, up / (double) n, 3 * se);
    }

    @Test
    void stochasticRoundingIsReproducibleForASeed() {
        ElementRounding a = Rounding.stochastic(5);
        ElementRounding b = Rounding.stochastic(5);
        ElementRounding c = Rounding.stochastic(6);
        assertEquals(a, b);
        assertNotEquals(a, c);
        int differ = 0;
        for (int i = 0; i < 1000; i++) {
            assertEquals(a.round(0.5, i), b.round(0.5, i));
            differ += a.round(0.5, i) != c.round(0.5, i) ? 1 : 0;
        }
        assertTrue(differ > 300, "another seed gives other draws: " + differ);
        assertEquals("stochastic(seed=5)", a.label());
    }

    @Test
    void customRuleIsUsedAndChecked() {
        ElementRounding towardZero = Rounding.custom("toward-zero", (x, i) -> x < 0 ? Math.ceil(x) : Math.floor(x));
        assertEquals(-2.0, towardZero.round(-2.7, 0));
        assertEquals(2.0, towardZero.round(2.7, 0));
        assertEquals("toward-zero", towardZero.label());
        ElementRounding bad = Rounding.custom("half", (x, i) -> x / 2);
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class, () -> bad.round(3, 9));
        assertTrue(e.getMessage().contains("'half'") && e.getMessage().contains("1.5"), e.getMessage());
        assertThrows(IllegalArgumentException.class, () -> Rounding.custom(" ", (x, i) -> x));
    }

    @Test
    void gridAssignmentNumbersSegmentsLikeTensorGroups() {
        // shape [2, 4], groups of 2 along axis 1: row-major order of (row, group) -> 0, 0, 1, 1, 2, 2, 3, 3
        GridAssignment g = GridAssignment.of(new int[] {2, 4}, 1, 2, -8, 7, new float[] {1, 2, 3, 4},
                new float[] {0, 0, 0, 0});
        int[] expect = {0, 0, 1, 1, 2, 2, 3, 3};
        for (int i = 0; i < 8; i++) {
            assertEquals(expect[i], g.segmentOf(i));
        }
        assertEquals(4, g.segmentCount());
        assertEquals(6.0, g.value(3, 3));
        assertEquals(7, g.nearestCode(0, 100.0));
        // groups along axis 0 of a [4, 2] tensor: segment = group * 2 + column
        GridAssignment h = GridAssignment.of(new int[] {4, 2}, 0, 2, -8, 7, new float[] {1, 1, 1, 1},
                new float[] {0, 0, 0, 0});
        int[] expectH = {0, 1, 0, 1, 2, 3, 2, 3};
        for (int i = 0; i < 8; i++) {
            assertEquals(expectH[i], h.segmentOf(i));
        }
        assertThrows(IllegalArgumentException.class, () -> GridAssignment.of(new int[] {2, 4}, 1, 3, -8, 7,
                new float[] {1}, new float[] {0}));
    }
}
