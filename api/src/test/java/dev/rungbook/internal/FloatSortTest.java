package dev.rungbook.internal;

import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.testing.Fixtures;
import java.util.Arrays;
import java.util.Random;
import org.junit.jupiter.api.Test;

class FloatSortTest {

    /** Sorts a copy both ways and compares bit patterns, so -0.0 versus +0.0 order is checked too. */
    private static void assertSortsLikeArraysSort(float[] data) {
        float[] expected = data.clone();
        Arrays.sort(expected); // Source: the JDK's Arrays.sort(float[]) total order
        float[] actual = data.clone();
        FloatSort.sort(actual);
        for (int i = 0; i < data.length; i++) {
            if (Float.floatToRawIntBits(expected[i]) != Float.floatToRawIntBits(actual[i])) {
                throw new AssertionError("index " + i + ": expected " + expected[i] + " got " + actual[i]);
            }
        }
    }

    @Test
    void sortsARangeLikeArraysSortAndLeavesTheRestAlone() {
        Random r = Fixtures.random(3);
        for (int len : new int[] {0, 5, FloatSort.RADIX_THRESHOLD - 1, FloatSort.RADIX_THRESHOLD, 50_000}) {
            float[] v = new float[len + 300];
            for (int i = 0; i < v.length; i++) {
                v[i] = i % 97 == 0 ? (i % 2 == 0 ? -0.0f : 0.0f) : (float) r.nextGaussian();
            }
            float[] expected = v.clone();
            Arrays.sort(expected, 100, 100 + len); // Source: the JDK's Arrays.sort(float[], int, int) total order
            FloatSort.sortRange(v, 100, 100 + len);
            for (int i = 0; i < v.length; i++) {
                assertEquals(Float.floatToRawIntBits(expected[i]), Float.floatToRawIntBits(v[i]),
                        "length " + len + ", index " + i);
            }
        }
    }

    @Test
    void sortsRandomValuesLikeArraysSort() {
        Random r = Fixtures.random(1);
        for (int n : new int[] {0, 1, 7, 4095, 4096, 4097, 100_000, 1 << 20}) {
            float[] v = new float[n];
            for (int i = 0; i < n; i++) {
                v[i] = (float) (r.nextGaussian() * Math.pow(10, r.nextInt(20) - 10));
            }
            assertSortsLikeArraysSort(v);
        }
    }

    @Test
    void sortsDuplicatesNegativesAndSignedZeros() {
        Random r = Fixtures.random(2);
        float[] v = new float[50_000];
        float[] pool = {-0.0f, 0.0f, -1f, 1f, 3.5f, -3.5f, Float.MAX_VALUE, -Float.MAX_VALUE, Float.MIN_VALUE,
            -Float.MIN_VALUE, Float.POSITIVE_INFINITY, Float.NEGATIVE_INFINITY, 1e-40f, -1e-40f};
        for (int i = 0; i < v.length; i++) {
            v[i] = pool[r.nextInt(pool.length)];
        }
        assertSortsLikeArraysSort(v);
        float[] sorted = v.clone();
        FloatSort.sort(sorted);
        int firstPlusZero = -1;
        int lastMinusZero = -1;
        for (int i = 0; i < sorted.length; i++) {
            int bits = Float.floatToRawIntBits(sorted[i]);
            if (bits == 0) {
                firstPlusZero = firstPlusZero < 0 ? i : firstPlusZero;
            } else if (bits == Integer.MIN_VALUE) {
                lastMinusZero = i;
            }
        }
        assertTrue(lastMinusZero >= 0 && lastMinusZero < firstPlusZero, "-0.0 sorts before +0.0");
    }

    @Test
    void sortsAllEqualAndNarrowRanges() {
        float[] same = new float[10_000];
        Arrays.fill(same, 2.5f);
        assertSortsLikeArraysSort(same);
        float[] narrow = new float[10_000];
        Random r = Fixtures.random(3);
        for (int i = 0; i < narrow.length; i++) {
            narrow[i] = 1f + r.nextInt(100) * Math.ulp(1f); // keys differ only in the lowest digit
        }
        assertSortsLikeArraysSort(narrow);
    }

    @Test
    void sortedCopyLeavesInputAndMatchesSort() {
        Random r = Fixtures.random(4);
        for (int n : new int[] {0, 100, 4096, 70_000}) {
            float[] v = new float[n];
            for (int i = 0; i < n; i++) {
                v[i] = r.nextInt(3) == 0 ? -0.0f : (float) r.nextGaussian();
            }
            float[] before = v.clone();
            float[] copy = FloatSort.sortedCopy(v);
            assertArrayEquals(before, v, "input unchanged");
            float[] expected = v.clone();
            Arrays.sort(expected); // Source: the JDK's Arrays.sort(float[]) total order
            assertArrayEquals(expected, copy);
        }
        float[] same = new float[5000];
        Arrays.fill(same, 7f);
        assertArrayEquals(same, FloatSort.sortedCopy(same));
    }

    @Test
    void compressesToDistinctValuesWithCounts() {
        float[] sorted = {-2f, -2f, -0.0f, 0.0f, 0.0f, 1.5f, 3f, 3f, 3f};
        double[][] vc = FloatSort.distinctWithCounts(sorted);
        assertArrayEquals(new double[] {-2, 0, 1.5, 3}, vc[0]);
        assertArrayEquals(new double[] {2, 3, 1, 3}, vc[1]);
        assertEquals(0, Double.doubleToRawLongBits(vc[0][1]), "signed zeros merge into +0.0");
        double[][] empty = FloatSort.distinctWithCounts(new float[0]);
        assertEquals(0, empty[0].length);
        assertEquals(0, empty[1].length);
    }

    @Test
    void refusesUnsortedOrNaNInput() {
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                () -> FloatSort.distinctWithCounts(new float[] {1f, 2f, 1.5f}));
        assertTrue(e.getMessage().contains("index 2"), e.getMessage());
        e = assertThrows(IllegalArgumentException.class,
                () -> FloatSort.distinctWithCounts(new float[] {1f, Float.NaN}));
        assertTrue(e.getMessage().contains("index 1"), e.getMessage());
    }
}
