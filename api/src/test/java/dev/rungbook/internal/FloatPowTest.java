package dev.rungbook.internal;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertTrue;

import java.util.SplittableRandom;
import org.junit.jupiter.api.Test;

/** The float32 power of adaptive rounding's regulariser against java.lang.Math in double precision. */
class FloatPowTest {
    @Test
    void log2WithinItsBoundOverTheFloatRange() {
        SplittableRandom r = new SplittableRandom(1);
        double worst = 0;
        for (int i = 0; i < 2_000_000; i++) {
            // every exponent from 2^-126 to 2^127, random mantissas
            float a = (float) Math.scalb(1 + r.nextDouble(), r.nextInt(-126, 127));
            // Source: java.lang.Math.log in double precision (the reference).
            double exact = Math.log(a) / Math.log(2);
            // float rounding of the result (half a step, 2^-24 |log2 a|) plus the error of the series
            worst = Math.max(worst, Math.abs(FloatPow.log2(a) - exact) - 0x1p-24 * Math.abs(exact));
        }
        assertTrue(worst < 3e-7, "log2 error beyond the rounding of the result " + worst);
        assertEquals(0f, FloatPow.log2(1f), 0f);
        assertEquals(-3f, FloatPow.log2(0.125f), 0f);
    }

    @Test
    void exp2WithinItsBoundOverTheRangeUsed() {
        SplittableRandom r = new SplittableRandom(2);
        double worst = 0;
        for (int i = 0; i < 2_000_000; i++) {
            float y = (float) (-126 + 253 * r.nextDouble());
            // Source: java.lang.Math.exp in double precision (the reference), at the float argument.
            double exact = Math.exp(y * Math.log(2));
            worst = Math.max(worst, Math.abs(FloatPow.exp2(y) - exact) / exact);
        }
        assertTrue(worst < 3e-7, "exp2 relative error " + worst);
        assertEquals(1f, FloatPow.exp2(0f), 0f);
        assertEquals(0.25f, FloatPow.exp2(-2f), 0f);
    }

    @Test
    void powWithinItsRelativeBoundAndFlushedBelow2ToTheMinus100() {
        SplittableRandom r = new SplittableRandom(3);
        double worst = 0;
        int checked = 0;
        int n = 1 << 16;
        float[] a = new float[n];
        float[] out = new float[n];
        float[] s1 = new float[n];
        float[] s2 = new float[n];
        // exponents p = beta - 1 of the regulariser: beta from 20 down to 1
        for (double p = 0; p <= 19.0; p += 0.37) {
            for (int i = 0; i < n; i++) {
                // a = |2h - 1| in [0, 1]: half uniform, half log-uniform down to 2^-40
                a[i] = (float) (i % 2 == 0 ? r.nextDouble() : Math.pow(2, -40 * r.nextDouble()));
            }
            a[0] = 0f;
            a[1] = 1f;
            FloatPow.pow(a, (float) p, out, n, s1, s2);
            for (int i = 0; i < n; i++) {
                assertEquals(Float.floatToRawIntBits(FloatPow.pow(a[i], (float) p)), Float.floatToRawIntBits(out[i]),
                        "array and scalar forms differ at a = " + a[i] + ", p = " + p);
                // Source: java.lang.Math.pow in double precision (the reference), at the float arguments.
                double exact = Math.pow(a[i], (float) p);
                if (exact >= 0x1p-99) {
                    worst = Math.max(worst, Math.abs(out[i] - exact) / exact);
                    checked++;
                } else if (exact <= 0x1p-101 && a[i] > 0) {
                    assertEquals(0f, out[i], 0f, "flushed to 0 at a = " + a[i] + ", p = " + p);
                }
                assertTrue(out[i] == 0f || out[i] >= Float.MIN_NORMAL, "no subnormal result " + out[i]);
            }
        }
        assertTrue(checked > 1_000_000, "checked " + checked);
        assertTrue(worst < 1e-5, "pow relative error " + worst);
        System.out.printf("FloatPow: largest relative error of a^p (p <= 19) %.3g over %d values%n", worst, checked);
        assertEquals(1f, FloatPow.pow(0f, 0f), 0f);
        assertEquals(0f, FloatPow.pow(0f, 1f), 0f);
        assertEquals(1f, FloatPow.pow(1f, 18.5f), 0f);
    }
}
