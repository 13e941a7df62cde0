package dev.rungbook.internal;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;

import dev.rungbook.testing.Fixtures;
import java.util.Random;
import org.junit.jupiter.api.Test;

class Nf4Test {
    // Source: Dettmers et al., "QLoRA" (2023), NF4 table as printed in check-values.md §6 [seen]
    private static final double[] PUBLISHED = {-1.0, -0.6961928009986877, -0.5250730514526367, -0.39491748809814453,
        -0.28444138169288635, -0.18477343022823334, -0.09105003625154495, 0.0, 0.07958029955625534,
        0.16093020141124725, 0.24611230194568634, 0.33791524171829224, 0.44070982933044434, 0.5626170039176941,
        0.7229568362236023, 1.0};

    @Test
    void constructionReproducesPublishedTable() {
        float[] levels = Nf4.levels();
        assertEquals(16, levels.length);
        for (int i = 0; i < 16; i++) {
            assertEquals(PUBLISHED[i], levels[i], 2e-7, "level " + i);
        }
        assertEquals(0f, levels[7]);
    }

    @Test
    void nearestMatchesExhaustiveSearch() {
        float[] levels = Nf4.levels();
        Random r = Fixtures.random(61);
        for (int t = 0; t < 100_000; t++) {
            float x = (float) (r.nextDouble() * 2.4 - 1.2);
            int best = 0;
            for (int i = 1; i < 16; i++) {
                if (Math.abs((double) x - levels[i]) < Math.abs((double) x - levels[best])) {
                    best = i; // strict: a tie keeps the lower index
                }
            }
            assertEquals(best, Nf4.nearest(x), "x=" + x);
        }
        assertEquals(0, Nf4.nearest(-5f));
        assertEquals(15, Nf4.nearest(5f));
        assertEquals(7, Nf4.nearest(0f));
        for (int i = 0; i < 16; i++) {
            assertEquals(i, Nf4.nearest(levels[i]));
        }
        assertThrows(IllegalArgumentException.class, () -> Nf4.nearest(Float.NaN));
    }

    @Test
    void exactTieGoesToLowerLevel() {
        // the midpoint of levels 7 (which is 0) and 8 is levels[8] / 2, exact in float
        float[] levels = Nf4.levels();
        assertEquals(7, Nf4.nearest(levels[8] / 2));
        assertEquals(6, Nf4.nearest(levels[6] / 2));
    }
}
