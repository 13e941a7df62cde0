package dev.rungbook.nn;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;

import java.util.Random;
import org.junit.jupiter.api.Test;

class BitPackedTest {
    @Test
    void binaryDotEqualsTheFloatDotProductExactly() {
        // Source: check-values.md §11: with bit 1 = +1, dot = n - 2 popcount(XOR(a, b)); reference is the float dot.
        Random r = new Random(1);
        for (int n : new int[] {1, 63, 64, 65, 200, 1000}) {
            for (int t = 0; t < 20; t++) {
                float[] a = new float[n];
                float[] b = new float[n];
                for (int i = 0; i < n; i++) {
                    a[i] = r.nextBoolean() ? 1 : -1;
                    b[i] = r.nextBoolean() ? 1 : -1;
                }
                assertEquals(floatDot(a, b), BitPacked.binary(a).dot(BitPacked.binary(b)), "n " + n);
            }
        }
    }

    @Test
    void ternaryDotEqualsTheFloatDotProductExactly() {
        Random r = new Random(2);
        for (int n : new int[] {1, 64, 77, 500}) {
            for (int t = 0; t < 20; t++) {
                float[] a = new float[n];
                float[] b = new float[n];
                for (int i = 0; i < n; i++) {
                    a[i] = r.nextInt(3) - 1;
                    b[i] = r.nextInt(3) - 1;
                }
                assertEquals(floatDot(a, b), BitPacked.ternary(a).dot(BitPacked.ternary(b)), "n " + n);
            }
        }
    }

    @Test
    void rejectsMismatchesAndBadValues() {
        assertThrows(IllegalArgumentException.class,
                () -> BitPacked.binary(new float[3]).dot(BitPacked.binary(new float[4])));
        assertThrows(IllegalArgumentException.class,
                () -> BitPacked.binary(new float[3]).dot(BitPacked.ternary(new float[3])));
        assertThrows(IllegalArgumentException.class, () -> BitPacked.ternary(new float[] {0.5f}));
        assertThrows(IllegalArgumentException.class, () -> BitPacked.binary(new float[] {Float.NaN}));
        assertEquals(16, BitPacked.ternary(new float[64]).bytes());
    }

    private static int floatDot(float[] a, float[] b) {
        float s = 0;
        for (int i = 0; i < a.length; i++) {
            s += a[i] * b[i];
        }
        return (int) s;
    }
}
