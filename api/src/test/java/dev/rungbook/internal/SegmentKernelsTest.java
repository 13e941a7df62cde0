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

    // ------------------------------------------------------------------ runs of segments, plain and Vector API

    @Test
    void theVectorKernelsArePresentInTheTestJvm() {
        assertTrue(SegmentKernels.vectorised(), "surefire runs with --add-modules jdk.incubator.vector");
    }

    /** Values for a run of segments: random, signed zeros, ties of the scale, equal values (zero range). */
    private static float[] runValues(SplittableRandom r, int n, float scale) {
        float[] v = new float[n];
        for (int i = 0; i < n; i++) {
            int k = r.nextInt(8);
            v[i] = k == 0 ? -0f : k == 1 ? 0f : k == 2 ? (float) ((r.nextInt(-20, 20) + 0.5) * scale)
                    : (float) (r.nextGaussian() * scale * Math.exp(r.nextDouble(-6, 3)));
        }
        // a constant stretch (every segment inside it has a zero range)
        int from = r.nextInt(Math.max(1, n / 2));
        java.util.Arrays.fill(v, from, Math.min(n, from + n / 4), r.nextBoolean() ? 0f : 1.25f * scale);
        return v;
    }

    @Test
    void runReductionsAreThePlainMinimaAndMaxima() {
        SplittableRandom r = new SplittableRandom(404);
        for (int m : new int[] {1, 3, 7, 8, 9, 16, 31, 64, 100, 128, 257}) {
            int count = 1 + r.nextInt(9);
            int off = r.nextInt(5);
            float[] w = runValues(r, off + count * m + 3, (float) Math.exp(r.nextDouble(-20, 20)));
            float[] lo = new float[count];
            float[] hi = new float[count];
            float[] amax = new float[count];
            float[] vlo = new float[count];
            float[] vhi = new float[count];
            float[] vamax = new float[count];
            SegmentKernels.scalarMinMax(w, off, count, m, lo, hi);
            SegmentKernels.scalarMaxAbs(w, off, count, m, amax);
            VectorSegments.minMax(w, off, count, m, vlo, vhi);
            VectorSegments.maxAbs(w, off, count, m, vamax);
            for (int k = 0; k < count; k++) {
                int from = off + k * m;
                // Source: the definition, Math.min / Math.max over the segment (-0.0 below 0.0).
                float[] want = Lanes.scalarMinMax(w, from, from + m, Float.POSITIVE_INFINITY,
                        Float.NEGATIVE_INFINITY);
                float wantAbs = Lanes.scalarMaxAbs(w, from, from + m);
                String at = "m " + m + " segment " + k;
                assertEquals(Float.floatToRawIntBits(want[0]), Float.floatToRawIntBits(lo[k]), "min, " + at);
                assertEquals(Float.floatToRawIntBits(want[1]), Float.floatToRawIntBits(hi[k]), "max, " + at);
                assertEquals(Float.floatToRawIntBits(wantAbs), Float.floatToRawIntBits(amax[k]), "max |x|, " + at);
                assertEquals(Float.floatToRawIntBits(want[0]), Float.floatToRawIntBits(vlo[k]), "vector min, " + at);
                assertEquals(Float.floatToRawIntBits(want[1]), Float.floatToRawIntBits(vhi[k]), "vector max, " + at);
                assertEquals(Float.floatToRawIntBits(wantAbs), Float.floatToRawIntBits(vamax[k]),
                        "vector max |x|, " + at);
            }
        }
    }

    @Test
    void runReductionsMakeNanAndInfinityVisible() {
        for (float bad : new float[] {Float.NaN, -Float.NaN, Float.intBitsToFloat(0xFFC00001),
            Float.POSITIVE_INFINITY, Float.NEGATIVE_INFINITY}) {
            for (int m : new int[] {1, 5, 8, 64, 70}) {
                for (int at = 0; at < m; at += 3) {
                    float[] w = new float[2 * m];
                    java.util.Arrays.fill(w, -2.5f);
                    w[m + at] = bad;
                    float[][] lo = new float[2][2];
                    float[][] hi = new float[2][2];
                    float[][] amax = new float[2][2];
                    SegmentKernels.scalarMinMax(w, 0, 2, m, lo[0], hi[0]);
                    VectorSegments.minMax(w, 0, 2, m, lo[1], hi[1]);
                    SegmentKernels.scalarMaxAbs(w, 0, 2, m, amax[0]);
                    VectorSegments.maxAbs(w, 0, 2, m, amax[1]);
                    for (int p = 0; p < 2; p++) {
                        String what = (p == 0 ? "plain" : "vector") + " m " + m + " at " + at + " " + bad;
                        assertEquals(-2.5f, lo[p][0], what);
                        assertEquals(2.5f, amax[p][0], what);
                        assertTrue(!Float.isFinite(lo[p][1]) || !Float.isFinite(hi[p][1]), what);
                        assertTrue(!(amax[p][1] <= Float.MAX_VALUE), what);
                    }
                }
            }
        }
    }

    @Test
    void runLinearKernelsEqualThePlainKernelBitForBit() {
        SplittableRandom r = new SplittableRandom(405);
        int redone = 0;
        for (int trial = 0; trial < 120; trial++) {
            int m = new int[] {1, 5, 8, 13, 16, 64, 128, 130}[trial % 8];
            int count = 1 + r.nextInt(12);
            int off = r.nextInt(9);
            int bits = trial % 3 == 0 ? 2 + r.nextInt(15) : 2 + r.nextInt(7);
            boolean unsigned = trial % 4 == 1;
            int qmin = unsigned ? 0 : -(1 << (bits - 1));
            int qmax = unsigned ? (1 << bits) - 1 : (1 << (bits - 1)) - 1;
            float base = (float) Math.exp(r.nextDouble(-30, 30));
            float[] w = runValues(r, off + 2 * count * m + 4, base); // the next run's values too
            float[] scales = new float[count + 2];
            float[] zeros = trial % 5 == 0 ? null : new float[count + 2];
            for (int k = 0; k < scales.length; k++) {
                scales[k] = trial % 7 == 0 ? Math.scalb(1f, r.nextInt(-149, 100))
                        : (float) (base * Math.exp(r.nextDouble(-3, 3)));
                if (zeros != null) {
                    zeros[k] = k % 3 == 0 ? 0f : qmin + r.nextInt(qmax - qmin + 1);
                }
            }
            int s0 = r.nextInt(3);
            for (int i = off; i < off + count * m; i++) {
                if (r.nextInt(4) == 0) { // a tie of the segment's own scale (x / s a half-integer)
                    float x = (float) ((r.nextInt(-2 * qmax - 4, 2 * qmax + 4) + 0.5) * scales[s0 + (i - off) / m]);
                    w[i] = Float.isFinite(x) ? x : w[i];
                }
            }
            boolean small = bits <= 8;
            float[] deq = new float[w.length];
            float[] vdeq = new float[w.length];
            byte[] b = small ? new byte[w.length] : null;
            byte[] vb = small ? new byte[w.length] : null;
            short[] sh = small ? null : new short[w.length];
            short[] vsh = small ? null : new short[w.length];
            int want = SegmentKernels.scalarLinear(w, off, count, m, scales, zeros, s0, qmin, qmax, deq, b, sh);
            int nextCount = r.nextInt(count + 1);
            float[] ahead = new float[count];
            int got = VectorSegments.linear(w, off, count, m, scales, zeros, s0, qmin, qmax, vdeq, vb, vsh, nextCount,
                    ahead);
            redone += got;
            assertAheadIsMaxAbs(w, off + count * m, nextCount, m, ahead, "trial " + trial);
            for (int i = off; i < off + count * m; i++) {
                int k = (i - off) / m;
                String at = "trial " + trial + " x " + w[i] + " scale " + scales[s0 + k];
                // Source: the definition clamp(rint(x / s + z)) in double (ties to even), value s (q - z).
                float z = zeros == null ? 0f : zeros[s0 + k];
                double c = Math.rint(w[i] / (double) scales[s0 + k] + z);
                int code = (int) Math.max(qmin, Math.min(qmax, c));
                float value = (float) ((double) scales[s0 + k] * (code - (double) z));
                if (small) {
                    assertEquals((byte) code, b[i], at);
                    assertEquals(b[i], vb[i], at);
                } else {
                    assertEquals((short) code, sh[i], at);
                    assertEquals(sh[i], vsh[i], at);
                }
                assertEquals(Float.floatToRawIntBits(value), Float.floatToRawIntBits(deq[i]), at);
                assertEquals(Float.floatToRawIntBits(deq[i]), Float.floatToRawIntBits(vdeq[i]), at);
            }
            // nothing written outside the run
            for (int i = 0; i < off; i++) {
                assertEquals(0, Float.floatToRawIntBits(vdeq[i]));
            }
            for (int i = off + count * m; i < w.length; i++) {
                assertEquals(0, Float.floatToRawIntBits(vdeq[i]));
            }
        }
        assertTrue(redone > 1000, "ties were met and redone: " + redone);
    }

    /** The largest magnitudes a run kernel took of the next run on the side equal the plain {@code maxAbs}'s. */
    private static void assertAheadIsMaxAbs(float[] w, int from, int count, int m, float[] got, String at) {
        float[] want = new float[Math.max(1, count)];
        SegmentKernels.scalarMaxAbs(w, from, count, m, want);
        for (int k = 0; k < count; k++) {
            // Source: the definition, max |x| over the segment, computed in double
            double a = 0;
            for (int i = from + k * m; i < from + (k + 1) * m; i++) {
                a = Math.max(a, Math.abs((double) w[i]));
            }
            assertEquals(a, want[k], at + ", next segment " + k);
            assertEquals(Float.floatToRawIntBits(want[k]), Float.floatToRawIntBits(got[k]), at + ", next segment " + k);
        }
    }

    @Test
    void runLevelKernelsEqualThePlainKernelBitForBit() {
        SplittableRandom r = new SplittableRandom(406);
        float[] lv = Nf4.levels();
        SegmentKernels.Levels table = SegmentKernels.Levels.of(lv);
        float[] y = new float[4096];
        int redone = 0;
        for (int trial = 0; trial < 240; trial++) {
            int m = new int[] {1, 7, 8, 9, 16, 64, 100, 4096 + 24}[trial % 8];
            int count = 1 + r.nextInt(m > 200 ? 2 : 10);
            int off = r.nextInt(9);
            float[] w = new float[off + 2 * count * m + 5];
            for (int i = off + count * m; i < w.length; i++) { // the next run's values
                w[i] = (float) (r.nextGaussian() * Math.exp(r.nextDouble(-80, 80)));
            }
            float[] scales = new float[count + 3];
            int s0 = r.nextInt(3);
            for (int k = 0; k < scales.length; k++) {
                scales[k] = (float) Math.exp(r.nextDouble(-80, 80));
            }
            for (int k = 0; k < count; k++) {
                float sc = scales[s0 + k];
                boolean zeroBlock = r.nextInt(10) == 0;
                for (int j = 0; j < m; j++) {
                    int q = r.nextInt(15);
                    float x = (float) (((double) lv[q] + lv[q + 1]) / 2 * sc);
                    int c = r.nextInt(6);
                    x = c == 0 ? Math.nextUp(x) : c == 1 ? Math.nextDown(x) : c == 2 ? x
                            : c == 3 ? lv[r.nextInt(16)] * sc : (float) (r.nextDouble(-1, 1) * sc);
                    // |x / scale| <= 1, as the absmax scale gives; all zeros in a zero-range block (scale 1)
                    w[off + k * m + j] = zeroBlock ? (r.nextBoolean() ? 0f : -0f) : Math.max(-sc, Math.min(sc, x));
                }
            }
            float[] deq = new float[w.length];
            float[] vdeq = new float[w.length];
            byte[] b = new byte[w.length];
            byte[] vb = new byte[w.length];
            SegmentKernels.scalarLevels(w, off, count, m, scales, s0, table, deq, b, y);
            int nextCount = r.nextInt(count + 1);
            float[] ahead = new float[count];
            // both forms: the kernel the library picks (sixteen lanes with AVX-512 and m >= 16) and the eight-lane one
            int form = trial / 8 % 2;
            redone += form == 0 ? VectorSegments.levels(w, off, count, m, scales, s0, table, vdeq, vb, nextCount, ahead)
                    : VectorSegments.levels8(w, off, count, m, scales, s0, table, vdeq, vb, nextCount, ahead);
            assertAheadIsMaxAbs(w, off + count * m, nextCount, m, ahead, "trial " + trial);
            for (int i = off; i < off + count * m; i++) {
                float sc = scales[s0 + (i - off) / m];
                // Source: the definition, the number of midpoints (in double) strictly below w / scale (in double):
                // a quotient exactly on a midpoint goes to the lower level.
                double q = w[i] / (double) sc;
                int want = 0;
                for (int j = 0; j < 15; j++) {
                    want += ((double) lv[j] + lv[j + 1]) / 2 < q ? 1 : 0;
                }
                String at = "trial " + trial + " form " + form + " x " + w[i] + " scale " + sc;
                assertEquals(want, b[i], at);
                assertEquals(b[i], vb[i], at);
                assertEquals(Float.floatToRawIntBits(sc * lv[want]), Float.floatToRawIntBits(deq[i]), at);
                assertEquals(Float.floatToRawIntBits(deq[i]), Float.floatToRawIntBits(vdeq[i]), at);
            }
            for (int i = off + count * m; i < w.length; i++) {
                assertEquals(0, vb[i]);
            }
        }
        assertTrue(redone > 1000, "values next to midpoints were counted in double: " + redone);
    }

    @Test
    void vectorBucketsHoldOneCodeOrNone() {
        // Every float quotient in [-1, 1] whose vector bucket has a code must have that code by the definition.
        SegmentKernels.Levels table = SegmentKernels.Levels.of(Nf4.levels());
        float[] lv = Nf4.levels();
        SplittableRandom r = new SplittableRandom(407);
        int checked = 0;
        for (int t = 0; t < 2_000_000; t++) {
            float yv = t % 2 == 0 ? (float) r.nextDouble(-1, 1)
                    : Math.nextAfter((float) (((double) lv[t % 15] + lv[t % 15 + 1]) / 2), r.nextBoolean() ? 2 : -2);
            int b = SegmentKernels.Levels.vectorBucket(yv);
            long entry = table.vectorEntries[b];
            int code = (int) (entry >> 32);
            if (code >= 0) {
                // Source: the definition, the number of midpoints (in double) strictly below the quotient.
                assertEquals(SegmentKernels.count(table.mids, yv), code, "y " + yv);
                assertEquals(Float.floatToRawIntBits(lv[code]), (int) entry, "the entry holds the code's level");
                checked++;
            } else {
                assertEquals(-1, code, "a bucket the double count decides has code -1: y " + yv);
            }
        }
        assertTrue(checked > 900_000, "the random quotients' buckets mostly hold one code: " + checked);
    }

    @Test
    void sixteenLaneBucketsHoldEveryQuotientTheyAreGiven() {
        // The sixteen-lane kernel's bucket is rint(x * fl(15 * fl(1 / s)) + 15) in one rounding, not a function of
        // the quotient x / s; its table is right if every quotient that reaches bucket b lies in permInterval(b)
        // and the bucket's count plus the threshold test is the definition's count.
        SegmentKernels.Levels table = SegmentKernels.Levels.of(Nf4.levels());
        assertTrue(table.permBase != null, "NF4's decision points are far enough apart for the sixteen-lane tables");
        SplittableRandom r = new SplittableRandom(408);
        int near = 0;
        int checked = 0;
        for (int t = 0; t < 2_000_000; t++) {
            float s = (float) Math.exp(r.nextDouble(-69, 69)); // within the kernel's scale range
            double q0 = switch (t % 3) {
                case 0 -> r.nextDouble(-1, 1);
                // quotients next to the buckets' edges and to the decision points, where rounding decides
                case 1 -> (r.nextInt(32) - 0.5) / 15 - 1 + r.nextDouble(-1e-6, 1e-6);
                default -> table.mids[r.nextInt(15)] + r.nextDouble(-1e-6, 1e-6);
            };
            float x = Math.max(-s, Math.min(s, (float) (q0 * s)));
            float rec = 1f / s;
            int b = Float.floatToRawIntBits(Math.fma(x, 15f * rec, 15f + 12582912f)) - Float.floatToRawIntBits(12582912f);
            assertTrue(b >= 0 && b <= 30, "bucket " + b);
            double q = x / (double) s;
            double[] in = SegmentKernels.Levels.permInterval(b);
            assertTrue(q >= in[0] && q <= in[1], "x " + x + " s " + s + " bucket " + b);
            float d = Math.fma(x, -rec, Float.intBitsToFloat(table.permThreshold[b]));
            if (Math.abs(d) <= 0x1p-21f) {
                near++; // the kernel counts these in double
                continue;
            }
            // Source: the definition, the number of decision points (in double) strictly below x / s in double.
            assertEquals(SegmentKernels.count(table.mids, q), table.permBase[b] + (d < 0 ? 1 : 0),
                    "x " + x + " s " + s);
            checked++;
        }
        assertTrue(checked > 1_500_000 && near > 0, "checked " + checked + ", near a threshold " + near);
    }

    @Test
    void sixteenLaneTablesRefuseCloseDecisionPoints() {
        // two decision points within one bucket's width (1/15): the eight-lane kernel's tables serve them
        assertEquals(null, SegmentKernels.Levels.of(new float[] {-1f, 0f, 0.01f, 0.02f, 1f}).permBase);
        // more than 16 levels
        float[] many = new float[17];
        for (int j = 0; j < many.length; j++) {
            many[j] = -1f + 2f * j / 16;
        }
        assertEquals(null, SegmentKernels.Levels.of(many).permBase);
        // four levels far apart: the tables apply, and count every decision point below a bucket
        SegmentKernels.Levels four = SegmentKernels.Levels.of(new float[] {-1f, -0.25f, 0.25f, 1f});
        assertEquals(0, four.permBase[0]);
        assertEquals(3, four.permBase[30]);
    }
}
