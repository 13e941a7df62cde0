package dev.rungbook.internal;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.tensor.FloatFormat;
import java.util.SplittableRandom;
import org.junit.jupiter.api.Test;

/**
 * The segment kernels on their own, against the plain definitions element by element (the engine-level comparison
 * with the general path is {@code dev.rungbook.quant.SegmentKernelsTest}).
 */
class SegmentKernelsTest {
    /** Random finite floats of every binade, with many values on and next to the grids' rounding boundaries. */
    private static float[] values(SplittableRandom r, int n, float near) {
        float[] v = new float[n];
        for (int i = 0; i < n; i++) {
            int k = r.nextInt(4);
            float x;
            if (k == 0) {
                do {
                    x = Float.intBitsToFloat(r.nextInt());
                } while (!Float.isFinite(x));
            } else if (k == 1) {
                // low bits cleared: exact grid points and midpoints of narrow formats, then nudged by a few ulps
                x = Float.intBitsToFloat(r.nextInt() & 0xFFFFF000 | (r.nextInt(3) == 0 ? r.nextInt(4) : 0));
                if (!Float.isFinite(x)) {
                    x = 1f;
                }
            } else {
                x = (float) (r.nextGaussian() * near * Math.exp(r.nextDouble(-12, 3)));
            }
            v[i] = x;
        }
        return v;
    }

    @Test
    void floatGridIsTheFormatsSaturatingRoundingAndEncoding() {
        SplittableRandom r = new SplittableRandom(401);
        for (FloatFormat f : FloatFormat.values()) {
            int n = 200_000;
            float[] w = values(r, n, f.max());
            float[] deq = new float[n];
            byte[] bytes = f.bitWidth() <= 8 ? new byte[n] : null;
            short[] shorts = bytes == null ? new short[n] : null;
            SegmentKernels.floatGrid(w, 0, n, 1f, f.exponentBits(), f.mantissaBits(), f.max(), deq, bytes, shorts);
            for (int i = 0; i < n; i++) {
                // Source: FloatFormat's exact conversion (tested against the OCP OFP8 and MX tables in FloatFormatTest).
                float want = f.roundSaturating(w[i]);
                int code = f.encode(want);
                int got = bytes != null ? bytes[i] & 0xFF : shorts[i] & 0xFFFF;
                assertEquals(code, got, f + ": code of " + w[i]);
                assertEquals(Float.floatToRawIntBits(want), Float.floatToRawIntBits(deq[i]), f + ": value of " + w[i]);
            }
        }
    }

    @Test
    void linearIsRintOfTheDoubleQuotientClamped() {
        SplittableRandom r = new SplittableRandom(402);
        int n = 100_000;
        float[] deq = new float[n];
        short[] codes = new short[n];
        int redone = 0;
        for (int k = 0; k < 60; k++) {
            float scale = k % 5 == 0 ? Math.scalb(1f, r.nextInt(-140, 100)) : (float) Math.exp(r.nextDouble(-80, 80));
            int bits = 2 + r.nextInt(15);
            int qmin = k % 2 == 0 ? -(1 << (bits - 1)) : 0;
            int qmax = k % 2 == 0 ? (1 << (bits - 1)) - 1 : (1 << bits) - 1;
            float zero = k % 3 == 0 ? 0f : qmin + r.nextInt(qmax - qmin + 1);
            float[] w = new float[n];
            for (int i = 0; i < n; i++) {
                // ties (j + 1/2) * scale, their neighbours, and values of every magnitude
                float x = (float) ((r.nextInt(-2 * qmax - 4, 2 * qmax + 4) + 0.5) * scale);
                int c = r.nextInt(5);
                w[i] = c == 0 ? x : c == 1 ? Math.nextUp(x) : c == 2 ? Math.nextDown(x)
                        : c == 3 ? (float) (r.nextGaussian() * scale * Math.exp(r.nextDouble(-10, 12))) : -0f;
                if (!Float.isFinite(w[i])) {
                    w[i] = Math.copySign(Float.MAX_VALUE, w[i]); // the kernel takes finite values
                }
            }
            redone += SegmentKernels.linear(w, 0, n, scale, zero, qmin, qmax, deq, null, codes);
            for (int i = 0; i < n; i++) {
                // Source: the definition clamp(rint(x / s + z)) in double (Math.rint: half to even), value s (q - z).
                double c = Math.rint(w[i] / (double) scale + zero);
                int want = (int) Math.max(qmin, Math.min(qmax, c));
                assertEquals((short) want, codes[i], "x " + w[i] + " scale " + scale + " zero " + zero);
                float value = (float) ((double) scale * (want - (double) zero));
                assertEquals(Float.floatToRawIntBits(value), Float.floatToRawIntBits(deq[i]), "value of " + w[i]);
            }
        }
        assertTrue(redone > 100_000, "ties were met and redone: " + redone);
    }

    @Test
    void levelsAreTheCountOfMidpointsBelowTheDoubleQuotient() {
        SplittableRandom r = new SplittableRandom(403);
        float[] lv = Nf4.levels();
        SegmentKernels.Levels table = SegmentKernels.Levels.of(lv);
        int n = 4096;
        float[] deq = new float[n];
        byte[] codes = new byte[n];
        float[] y = new float[n];
        int redone = 0;
        for (int k = 0; k < 100; k++) {
            float scale = (float) Math.exp(r.nextDouble(-90, 85));
            float[] w = new float[n];
            for (int i = 0; i < n; i++) {
                int j = r.nextInt(15);
                float x = (float) (((double) lv[j] + lv[j + 1]) / 2 * scale);
                int c = r.nextInt(5);
                x = c == 0 ? Math.nextUp(x) : c == 1 ? Math.nextDown(x) : c == 2 ? x : (float) (r.nextDouble(-1, 1)
                        * scale);
                w[i] = Math.max(-scale, Math.min(scale, x)); // |x / scale| <= 1, as the absmax scale gives
            }
            redone += SegmentKernels.levels(w, 0, n, scale, table, deq, codes, y);
            for (int i = 0; i < n; i++) {
                // Source: the definition, the number of midpoints (in double) strictly below w / scale (in double).
                double q = w[i] / (double) scale;
                int want = 0;
                for (int j = 0; j < 15; j++) {
                    want += ((double) lv[j] + lv[j + 1]) / 2 < q ? 1 : 0;
                }
                assertEquals(want, codes[i], "x " + w[i] + " scale " + scale);
                assertEquals(Float.floatToRawIntBits((float) ((double) scale * lv[want])),
                        Float.floatToRawIntBits(deq[i]));
            }
        }
        assertTrue(redone > 10_000, "values next to midpoints were counted in double: " + redone);
    }

    @Test
    void levelTablesRefuseBadLevels() {
        assertThrows(IllegalArgumentException.class, () -> SegmentKernels.Levels.of(new float[] {0.5f, 0.25f}));
        assertThrows(IllegalArgumentException.class, () -> SegmentKernels.Levels.of(new float[] {-2f, 1f}));
        assertThrows(IllegalArgumentException.class, () -> SegmentKernels.Levels.of(new float[] {1f}));
    }
}
