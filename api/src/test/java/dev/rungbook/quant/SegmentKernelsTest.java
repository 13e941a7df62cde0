package dev.rungbook.quant;

import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.internal.Nf4;
import dev.rungbook.internal.TensorAccess;
import dev.rungbook.progress.Progress;
import dev.rungbook.range.RangeRule;
import dev.rungbook.round.Rounding;
import dev.rungbook.tensor.FloatFormat;
import dev.rungbook.tensor.Tensor;
import java.util.ArrayList;
import java.util.List;
import java.util.SplittableRandom;
import org.junit.jupiter.api.Test;

/**
 * The fused segment kernels (linear per group, NF4 blocks, float formats per channel or tensor) against the engine's
 * general per-segment path, bit for bit: codes, scales, zero points, dequantized values and every error figure, on
 * seeded data built to hit exact ties, values next to ties and midpoints, constant and all-zero groups, negative
 * zeros, subnormals and magnitudes near the float32 limit.
 */
class SegmentKernelsTest {
    private static final FloatFormat[] FORMATS = FloatFormat.values();

    /** Fills {@code v[off, off + m)} with one of several patterns, chosen at random. */
    private static void fill(SplittableRandom r, float[] v, int off, int m) {
        int pattern = r.nextInt(12);
        int e = r.nextInt(-30, 30);
        float d = Math.scalb(1f, e);
        switch (pattern) {
            case 0: { // ties of a linear grid with step d: odd multiples of d/2, and their float neighbours
                int top = 1 << r.nextInt(1, 15);
                int loSteps = r.nextInt(0, top + 1);
                for (int i = 0; i < m; i++) {
                    float x = (r.nextInt(-2 * loSteps, 2 * top + 1)) * 0.5f * d;
                    int k = r.nextInt(4);
                    v[off + i] = k == 0 ? Math.nextUp(x) : k == 1 ? Math.nextDown(x) : x;
                }
                v[off] = top * d;
                v[off + m - 1] = -loSteps * d;
                break;
            }
            case 1: { // NF4: level midpoints times a power of two, their neighbours, and the levels themselves
                float[] lv = Nf4.levels();
                for (int i = 0; i < m; i++) {
                    int j = r.nextInt(15);
                    float x = (float) (((double) lv[j] + lv[j + 1]) / 2 * d);
                    int k = r.nextInt(5);
                    v[off + i] = k == 0 ? Math.nextUp(x) : k == 1 ? Math.nextDown(x) : k == 2 ? lv[j] * d : x;
                }
                v[off] = r.nextBoolean() ? d : -d;
                break;
            }
            case 2: { // a float format's grid midpoints times a power of two (scale max * 2^e / max = 2^e)
                FloatFormat f = FORMATS[r.nextInt(FORMATS.length)];
                int positive = 1 << (f.bitWidth() - 1);
                for (int i = 0; i < m; i++) {
                    int c = r.nextInt(positive);
                    float a = f.decode(c);
                    float b = c + 1 < positive ? f.decode(c + 1) : a;
                    if (!Float.isFinite(b) || Math.abs(b) > f.max()) {
                        b = a;
                    }
                    float x = (float) (((double) a + b) / 2 * d);
                    if (!Float.isFinite(x) || Math.abs(x) > f.max() * d) {
                        x = f.max() * d;
                    }
                    int k = r.nextInt(4);
                    x = k == 0 ? Math.nextUp(x) : k == 1 ? Math.nextDown(x) : x;
                    v[off + i] = r.nextBoolean() ? -x : x;
                }
                v[off] = f.max() * d;
                break;
            }
            case 3: { // constant
                float c = (float) (r.nextGaussian() * d);
                for (int i = 0; i < m; i++) {
                    v[off + i] = c;
                }
                break;
            }
            case 4: // zeros of both signs
                for (int i = 0; i < m; i++) {
                    v[off + i] = r.nextBoolean() ? 0f : -0f;
                }
                break;
            case 5: // subnormals and zeros
                for (int i = 0; i < m; i++) {
                    int k = r.nextInt(6);
                    v[off + i] = k == 0 ? -0f : Float.intBitsToFloat(r.nextInt(1, 1 << 23) | (k == 1 ? 1 << 31 : 0));
                }
                break;
            case 6: // near the float32 limit
                for (int i = 0; i < m; i++) {
                    int k = r.nextInt(5);
                    v[off + i] = k == 0 ? Float.MAX_VALUE : k == 1 ? -Float.MAX_VALUE : k == 2 ? Float.MIN_VALUE
                            : (float) (r.nextGaussian() * 1e38);
                }
                break;
            case 7: // mixed extremes: huge and tiny in one segment
                for (int i = 0; i < m; i++) {
                    int k = r.nextInt(4);
                    v[off + i] = k == 0 ? (float) (r.nextGaussian() * 1e30) : k == 1 ? Float.MIN_NORMAL
                            : k == 2 ? -0f : (float) (r.nextGaussian() * 1e-30);
                }
                break;
            case 8: // small integers (many exact ties at half steps after scaling)
                for (int i = 0; i < m; i++) {
                    v[off + i] = r.nextInt(-9, 10);
                }
                break;
            case 9: // non-negative
                for (int i = 0; i < m; i++) {
                    v[off + i] = (float) Math.abs(r.nextGaussian() * d);
                }
                break;
            default: // normal values of a random magnitude
                for (int i = 0; i < m; i++) {
                    v[off + i] = (float) (r.nextGaussian() * d);
                }
        }
    }

    /** A tensor of {@code shape} whose consecutive runs of {@code run} values each follow one pattern. */
    private static Tensor tensor(SplittableRandom r, int run, int... shape) {
        int n = 1;
        for (int s : shape) {
            n *= s;
        }
        float[] v = new float[n];
        for (int off = 0; off < n; off += run) {
            fill(r, v, off, Math.min(run, n - off));
        }
        return Tensor.of(v, shape).withName("t");
    }

    private static Quantized run(Quantizer q, Tensor t, boolean kernels) {
        return new Engine(q, t, Progress.silent(), kernels).run();
    }

    private static int[] bits(Tensor t) {
        float[] d = TensorAccess.data(t);
        int[] b = new int[d.length];
        for (int i = 0; i < d.length; i++) {
            b[i] = Float.floatToRawIntBits(d[i]);
        }
        return b;
    }

    private static long[] bits(double[] d) {
        long[] b = new long[d.length];
        for (int i = 0; i < d.length; i++) {
            b[i] = Double.doubleToRawLongBits(d[i]);
        }
        return b;
    }

    /** Runs both paths and compares everything a result holds. */
    private static void assertSameResults(Quantizer q, Tensor t) {
        Quantized want;
        try {
            want = run(q, t, false);
        } catch (IllegalArgumentException e) {
            String msg = e.getMessage();
            IllegalArgumentException got = null;
            try {
                run(q, t, true);
            } catch (IllegalArgumentException g) {
                got = g;
            }
            assertEquals(msg, got == null ? null : got.getMessage(), q.label() + ": the same refusal");
            return;
        }
        Quantized got = run(q, t, true);
        String what = q.label() + " on " + java.util.Arrays.toString(t.shape());
        // Source: the general per-segment path (gather, range, scale, round in double, dequantize, scatter), the
        // definition the kernels must reproduce bit for bit.
        assertArrayEquals(want.codes().toIntArray(), got.codes().toIntArray(), what + ": codes");
        assertEquals(want.codes().bits(), got.codes().bits(), what + ": code width");
        assertEquals(want.codes().signed(), got.codes().signed(), what + ": code sign");
        assertArrayEquals(bits(want.scales()), bits(got.scales()), what + ": scales");
        assertArrayEquals(want.scales().shape(), got.scales().shape(), what + ": scale shape");
        assertArrayEquals(bits(want.zeroPoints()), bits(got.zeroPoints()), what + ": zero points");
        assertArrayEquals(bits(want.dequantized()), bits(got.dequantized()), what + ": dequantized values");
        assertEquals(want.levels().isPresent(), got.levels().isPresent(), what + ": levels");
        if (want.levels().isPresent()) {
            assertArrayEquals(bits(want.levels().get()), bits(got.levels().get()), what + ": levels");
        }
        assertEquals(want.totalBits(), got.totalBits(), what + ": size");
        if (allFinite(want.dequantized())) {
            assertArrayEquals(bits(want.error().values()), bits(got.error().values()), what + ": error figures");
        }
    }

    private static boolean allFinite(Tensor t) {
        for (float x : TensorAccess.data(t)) {
            if (!Float.isFinite(x)) {
                return false;
            }
        }
        return true;
    }

    private static List<Quantizer> linearSpecs(int group) {
        List<Quantizer> specs = new ArrayList<>();
        for (int b : new int[] {2, 3, 4, 8, 12, 16}) {
            Quantizer base = Quantizer.linear(b);
            for (Quantizer q : new Quantizer[] {base, base.asymmetric(), base.unsigned(), base.asymmetric().unsigned(),
                base.narrowRange(), base.asymmetric().narrowRange(), base.powerOfTwoScale(),
                base.asymmetric().powerOfTwoScale(), base.unsigned().narrowRange()}) {
                specs.add(q.perGroup(-1, group));
                specs.add(q.perTensor());
                specs.add(q.perChannel(0));
            }
        }
        return specs;
    }

    private static List<Quantizer> floatSpecs() {
        List<Quantizer> specs = new ArrayList<>();
        for (FloatFormat f : FORMATS) {
            Quantizer base = Quantizer.floatFormat(f);
            specs.add(base);
            specs.add(base.perChannel(0));
            specs.add(base.powerOfTwoScale().perChannel(0));
            specs.add(base.blockSize(16));
            specs.add(base.unscaled());
            specs.add(base.unscaled().perChannel(0));
        }
        return specs;
    }

    private static List<Quantizer> nf4Specs() {
        return List.of(Quantizer.nf4(), Quantizer.nf4().blockSize(16), Quantizer.nf4().blockSize(128),
                Quantizer.nf4().powerOfTwoScale(), Quantizer.nf4().perChannel(0), Quantizer.nf4().perTensor());
    }

    @Test
    void linearKernelsEqualTheGeneralPathBitForBit() {
        SplittableRandom r = new SplittableRandom(301);
        for (int k = 0; k < 3; k++) {
            Tensor groups = tensor(r, 32, 40, 128);
            Tensor rows = tensor(r, 128, 40, 128);
            Tensor whole = tensor(r, 2048, 2048);
            for (Quantizer q : linearSpecs(32)) {
                assertSameResults(q, groups);
                assertSameResults(q, rows);
            }
            for (Quantizer q : linearSpecs(64)) {
                assertSameResults(q, whole);
            }
        }
    }

    @Test
    void nf4KernelEqualsTheGeneralPathBitForBit() {
        SplittableRandom r = new SplittableRandom(302);
        for (int k = 0; k < 4; k++) {
            Tensor blocks = tensor(r, 16, 64, 256);
            Tensor rows = tensor(r, 256, 64, 256);
            Tensor whole = tensor(r, 6000, 6000);
            for (Quantizer q : nf4Specs()) {
                assertSameResults(q, blocks);
                assertSameResults(q, rows);
                assertSameResults(q.perTensor(), whole);
            }
        }
    }

    @Test
    void codebookThroughTheLevelKernelEqualsTheGeneralPathBitForBit() {
        SplittableRandom r = new SplittableRandom(308);
        for (int trial = 0; trial < 3; trial++) {
            Tensor rows = tensor(r, 512, 8, 512);
            Tensor whole = tensor(r, 3000, 6000);
            float[] g = new float[20000];
            for (int i = 0; i < g.length; i++) {
                g[i] = (float) (Math.exp(r.nextDouble(-20, 20)) * r.nextGaussian());
            }
            Tensor gauss = Tensor.of(g, 100, 200).withName("g");
            for (int k : new int[] {2, 3, 16, 128}) {
                Quantizer q = Quantizer.codebook(k);
                assertSameResults(q, whole);
                assertSameResults(q, gauss);
                assertSameResults(q.perChannel(0), rows);
                assertSameResults(q.perChannel(0), gauss);
                assertSameResults(q.perChannel(1), gauss); // strided channels: the gathered segments' kernel
            }
        }
        float[] g = new float[4096];
        SplittableRandom s = new SplittableRandom(309);
        for (int i = 0; i < g.length; i++) {
            g[i] = (float) s.nextGaussian();
        }
        assertEquals("kernel", path(Quantizer.codebook(16), Tensor.of(g, g.length)), "the codebook's kernel ran");
        assertEquals("general", path(Quantizer.codebook(200), Tensor.of(g, g.length)), "too many levels for it");
    }

    @Test
    void floatKernelsEqualTheGeneralPathBitForBit() {
        SplittableRandom r = new SplittableRandom(303);
        for (int k = 0; k < 3; k++) {
            Tensor blocks = tensor(r, 16, 32, 160);
            Tensor rows = tensor(r, 160, 32, 160);
            Tensor whole = tensor(r, 5000, 5000);
            for (Quantizer q : floatSpecs()) {
                assertSameResults(q, blocks);
                assertSameResults(q, rows);
                assertSameResults(q.perTensor(), whole);
            }
        }
    }

    @Test
    void moreLayoutsAndOptionsGiveTheSameResults() {
        SplittableRandom r = new SplittableRandom(304);
        Tensor t3 = tensor(r, 16, 4, 8, 64);
        for (Quantizer q : new Quantizer[] {Quantizer.linear(4).perGroup(2, 16), Quantizer.linear(4).perGroup(1, 4),
            Quantizer.linear(4).perChannel(1), Quantizer.linear(4).perChannel(2), Quantizer.linear(4).midRise()
                .perGroup(-1, 16), Quantizer.linear(4).perGroup(-1, 16).rounding(Rounding.nearestTiesAway()),
            Quantizer.linear(4).perGroup(-1, 16).range(RangeRule.percentile(99)), Quantizer.nf4().blockSize(8),
            Quantizer.nf4().perChannel(1), Quantizer.nf4().blockSize(16).range(RangeRule.percentile(99)),
            Quantizer.floatFormat(FloatFormat.E4M3).perChannel(1), Quantizer.floatFormat(FloatFormat.E5M2)
                .perGroup(1, 2).powerOfTwoScale()}) {
            assertSameResults(q, t3);
        }
    }

    private static String path(Quantizer q, Tensor t) {
        Engine e = new Engine(q, t, Progress.silent(), true);
        e.run();
        return e.path();
    }

    @Test
    void theEngineRoutesExactlyTheCoveredSpecsToTheKernels() {
        SplittableRandom r = new SplittableRandom(305);
        float[] v = new float[4 * 8 * 64];
        for (int i = 0; i < v.length; i++) {
            v[i] = (float) r.nextGaussian();
        }
        Tensor t = Tensor.of(v, 32, 64);
        Tensor t3 = Tensor.of(v, 4, 8, 64);
        for (Quantizer q : new Quantizer[] {Quantizer.linear(4).perGroup(1, 128 / 2), Quantizer.linear(4).perGroup(-1,
            16).asymmetric(), Quantizer.linear(8).unsigned(), Quantizer.linear(3).perTensor().powerOfTwoScale(),
            Quantizer.nf4(), Quantizer.nf4().blockSize(16).powerOfTwoScale(), Quantizer.floatFormat(FloatFormat.E4M3)
                .perChannel(0), Quantizer.floatFormat(FloatFormat.E5M2), Quantizer.floatFormat(FloatFormat.BF16)
                .unscaled()}) {
            assertEquals("kernel", path(q, t), q.label());
        }
        assertEquals("kernel", path(Quantizer.linear(4).perGroup(2, 16), t3), "groups along the last axis");
        assertEquals("fused", path(Quantizer.linear(8).asymmetric(), t), "the row kernel keeps its specs");
        for (Quantizer q : new Quantizer[] {Quantizer.linear(4).perGroup(1, 4), Quantizer.linear(4).perChannel(1),
            Quantizer.linear(4).midRise().perGroup(-1, 16), Quantizer.linear(4).perGroup(-1, 16).rounding(
                Rounding.nearestTiesAway()), Quantizer.linear(4).perGroup(-1, 16).range(RangeRule.percentile(99)),
            Quantizer.nf4().perChannel(1), Quantizer.nf4().range(RangeRule.percentile(99)), Quantizer.floatFormat(
                FloatFormat.E4M3).perChannel(1), Quantizer.floatFormat(FloatFormat.E4M3).range(RangeRule.percentile(
                    99)), Quantizer.logarithmic(4)}) {
            assertEquals("general", path(q, t3), q.label());
        }
        assertEquals("general", new Engine(Quantizer.nf4(), t, Progress.silent(), false).path());
    }

    @Test
    void nanAndInfinityAreRefusedAsOnTheGeneralPath() {
        SplittableRandom r = new SplittableRandom(307);
        List<Quantizer> specs = new ArrayList<>(List.of(Quantizer.linear(4).perGroup(-1, 16), Quantizer.linear(8)
                .unsigned(), Quantizer.nf4().blockSize(16), Quantizer.floatFormat(FloatFormat.E4M3).perChannel(0),
                Quantizer.floatFormat(FloatFormat.E5M2).unscaled()));
        for (float bad : new float[] {Float.NaN, Float.POSITIVE_INFINITY, Float.NEGATIVE_INFINITY}) {
            for (int at : new int[] {0, 17, 500, 1023}) {
                float[] v = new float[1024];
                for (int i = 0; i < v.length; i++) {
                    v[i] = (float) r.nextGaussian();
                }
                v[at] = bad;
                v[(at + 700) % 1024] = bad; // a second bad value: the message names the first
                Tensor t = Tensor.of(v, 16, 64).withName("w");
                for (Quantizer q : specs) {
                    String want = null;
                    try {
                        run(q, t, false);
                    } catch (IllegalArgumentException e) {
                        want = e.getMessage();
                    }
                    String got = null;
                    try {
                        run(q, t, true);
                    } catch (IllegalArgumentException e) {
                        got = e.getMessage();
                    }
                    // Source: the general path's refusal (the whole tensor checked before any segment).
                    assertTrue(want != null && want.contains("index " + Math.min(at, (at + 700) % 1024)), want);
                    assertEquals(want, got, q.label());
                }
            }
        }
    }

    @Test
    void e4m3CodesOfTheKernelMatchTheSpecification() {
        float[] v = {448f, -448f, 0.001953125f, -0f, 240f, 0.5f, 1f, 2.25f};
        Quantized q = run(Quantizer.floatFormat(FloatFormat.E4M3).unscaled(), Tensor.of(v, 1, 8), true);
        // Source: OCP 8-bit Floating Point Specification (OFP8) rev. 1.0, E4M3 (bias 7): 448 = S.1111.110 = 0x7E,
        // 2^-9 = the smallest subnormal 0x01, -0 = 0x80, 240 = 0.1110.111 = 0x77, 0.5 = 0.0110.000 = 0x30,
        // 1 = 0x38, 2.25 = 0.1000.001 = 0x41 (bit patterns worked out from the format definition, from memory).
        assertArrayEquals(new int[] {0x7E, 0xFE, 0x01, 0x80, 0x77, 0x30, 0x38, 0x41}, q.codes().toIntArray());
        assertEquals(Float.floatToRawIntBits(-0f), Float.floatToRawIntBits(TensorAccess.data(q.dequantized())[3]));
    }

    @Test
    void int4GroupsOfWorkedExamples() {
        // Source: hand-computed. Symmetric int4 (qmax 7), group [-0.7, 0.35, 0.05, 0.7] (float32): scale
        // fl(0.7f / 7) = 0.1f, quotients -6.9999998, 3.4999999, 0.49999999, 7.0000000: codes -7, 3, 0, 7.
        float[] v = {-0.7f, 0.35f, 0.05f, 0.7f};
        Quantized k = run(Quantizer.linear(4).perGroup(-1, 4), Tensor.of(v, 1, 4), true);
        assertArrayEquals(new int[] {-7, 3, 0, 7}, k.codes().toIntArray());
        assertEquals(0.1f, TensorAccess.data(k.scales())[0]);
        // Exact ties, scale 0.875 / 7 = 0.125: 0.5 -> 0, 1.5 -> 2, 2.5 -> 2, -3.5 -> -4 (ties to even), 7.
        float[] ties = {0.0625f, 0.1875f, 0.3125f, -0.4375f, 0.875f, 0f, 0f, 0f};
        k = run(Quantizer.linear(4).perGroup(-1, 8), Tensor.of(ties, 1, 8), true);
        assertArrayEquals(new int[] {0, 2, 2, -4, 7, 0, 0, 0}, k.codes().toIntArray());
        // Asymmetric int4 (codes -8..7) on [-0.375, 1.5]: scale 1.875 / 15 = 0.125, zero point rint(-8 + 3) = -5;
        // 0.0625 -> 0.5 - 5 = -4.5 -> -4 and 0.1875 -> 1.5 - 5 = -3.5 -> -4 (ties to even).
        float[] asym = {-0.375f, 0.0625f, 0.1875f, 1.5f};
        k = run(Quantizer.linear(4).asymmetric().perGroup(-1, 4), Tensor.of(asym, 1, 4), true);
        assertArrayEquals(new int[] {-8, -4, -4, 7}, k.codes().toIntArray());
        assertEquals(-5f, TensorAccess.data(k.zeroPoints())[0]);
    }
}
