package dev.rungbook.quant;

import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertFalse;
import static org.junit.jupiter.api.Assertions.assertNotEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.internal.TensorAccess;
import dev.rungbook.metrics.ErrorReport;
import dev.rungbook.progress.OperationInterruptedException;
import dev.rungbook.progress.Progress;
import dev.rungbook.range.RangeRule;
import dev.rungbook.round.GridAssignment;
import dev.rungbook.round.LayerRounding;
import dev.rungbook.round.Rounding;
import dev.rungbook.tensor.DType;
import dev.rungbook.tensor.Tensor;
import dev.rungbook.testing.Fixtures;
import java.util.Random;
import java.util.concurrent.atomic.AtomicInteger;
import org.junit.jupiter.api.Test;

class LinearQuantizerTest {
    private static Tensor named(String name, float[] v, int... shape) {
        return Tensor.of(v, shape).withName(name);
    }

    @Test
    void symmetricInt8PerTensorReproducesHandComputedCodes() {
        // Source: common-practice formulas (check-values "Facts of the trade"): scale = max|x| / qmax, zero point 0,
        // q = round(x / scale) ties to even. max|x| = 2, qmax = 127: -1 -> -63.5 -> -64 (even), 0.5 -> 31.75 -> 32,
        // 0.25 -> 15.875 -> 16, 2 -> 127 (the float32 scale moves -63.5 by about 1e-7 at most).
        Tensor x = named("w", new float[] {-1f, 0.5f, 0.25f, 2f}, 2, 2);
        Quantized r = Quantizer.linear(8).perTensor().apply(x);
        assertArrayEquals(new int[] {-64, 32, 16, 127}, r.codes().toIntArray());
        assertEquals(2.0 / 127, r.scales().getFlat(0), 1e-9);
        assertEquals(0f, r.zeroPoints().getFlat(0));
        float s = r.scales().getFlat(0);
        assertEquals((float) (s * -64.0), r.dequantized().getFlat(0));
        assertEquals(2f, r.dequantized().getFlat(3), "the range end is reproduced exactly");
        assertEquals("w", r.dequantized().name());
    }

    @Test
    void asymmetricUint8ReproducesHandComputedCodesAndZeroPoint() {
        // Source: common-practice formulas: scale = (max - min) / (qmax - qmin) = 3/255, zero point
        // round(qmin - min/scale) = round(85) = 85; codes -1 -> 0, 0 -> 85, 1 -> 170, 2 -> 255.
        Tensor x = Tensor.of(new float[] {-1f, 0f, 1f, 2f}, 4);
        Quantized r = Quantizer.linear(8).asymmetric().unsigned().perTensor().apply(x);
        assertEquals(85f, r.zeroPoints().getFlat(0));
        assertEquals(3.0 / 255, r.scales().getFlat(0), 1e-8);
        assertArrayEquals(new int[] {0, 85, 170, 255}, r.codes().toIntArray());
        assertEquals(0f, r.dequantized().getFlat(1), "zero is exact");
        assertFalse(r.codes().signed());
    }

    @Test
    void perChannelAndPerGroupReproduceHandComputedScales() {
        // Source: common-practice formulas (scale = max|x| / qmax, q = round(x / scale), ties to even), by hand.
        // rows [0.25, -2, 3.5, 0.75] and [0.1, 0.2, -0.3, 0.4]; int4 symmetric: qmax 7.
        Tensor x = named("m", new float[] {0.25f, -2f, 3.5f, 0.75f, 0.1f, 0.2f, -0.3f, 0.4f}, 2, 4);
        Quantized ch = Quantizer.linear(4).apply(x);
        assertArrayEquals(new int[] {2}, ch.scales().shape());
        assertEquals(0.5f, ch.scales().getFlat(0));
        assertEquals(0.4 / 7, ch.scales().getFlat(1), 1e-8);
        // scale 0.5: 0.25 -> 0.5 -> 0 (even); -2 -> -4; 3.5 -> 7; 0.75 -> 1.5 -> 2 (even)
        assertArrayEquals(new int[] {0, -4, 7, 2}, java.util.Arrays.copyOf(ch.codes().toIntArray(), 4));
        // row 1 with scale 0.4/7: 0.1 -> 1.75 -> 2; 0.2 -> 3.5 -> 4; -0.3 -> -5.25 -> -5; 0.4 -> 7
        assertArrayEquals(new int[] {2, 4, -5, 7}, java.util.Arrays.copyOfRange(ch.codes().toIntArray(), 4, 8));
        // groups of 2 along axis 1: maxima 2, 3.5, 0.2, 0.4 -> scales shaped [2, 2]
        Quantized gr = Quantizer.linear(4).perGroup(1, 2).apply(x);
        assertArrayEquals(new int[] {2, 2}, gr.scales().shape());
        assertEquals(2.0 / 7, gr.scales().get(0, 0), 1e-7);
        assertEquals(0.5f, gr.scales().get(0, 1));
        assertEquals(0.2 / 7, gr.scales().get(1, 0), 1e-8);
        assertEquals(0.4 / 7, gr.scales().get(1, 1), 1e-8);
        // 0.25 / (2/7) = 0.875 -> 1; -2 -> -7; 3.5 / 0.5 = 7; 0.75 / 0.5 = 1.5 -> 2
        assertArrayEquals(new int[] {1, -7, 7, 2}, java.util.Arrays.copyOf(gr.codes().toIntArray(), 4));
        // groups along axis 0 (columns), size 2: each column is one group, max |column| = 0.25, 2, 3.5, 0.75
        Quantized col = Quantizer.linear(4).perGroup(0, 2).apply(x);
        assertArrayEquals(new int[] {1, 4}, col.scales().shape());
        assertEquals(0.25 / 7, col.scales().getFlat(0), 1e-8);
        assertEquals(0.5f, col.scales().getFlat(2));
        assertEquals(0.75 / 7, col.scales().getFlat(3), 1e-8);
    }

    @Test
    void codeRangesFollowBitsSignAndNarrowRange() {
        // Source: common practice: signed b-bit range -2^(b-1) .. 2^(b-1)-1 (2-bit -2..1, 4-bit -8..7), narrow
        // range drops -2^(b-1) (8-bit -127..127), unsigned 0 .. 2^b - 1.
        float[] v = Fixtures.gaussian(1, 4000);
        Tensor x = Tensor.of(v, 4000);
        int[][] expect = {{2, -2, 1}, {4, -8, 7}, {8, -128, 127}, {16, -32768, 32767}};
        for (int[] e : expect) {
            Quantized r = Quantizer.linear(e[0]).asymmetric().perTensor().apply(x);
            int lo = Integer.MAX_VALUE;
            int hi = Integer.MIN_VALUE;
            for (int c : r.codes().toIntArray()) {
                lo = Math.min(lo, c);
                hi = Math.max(hi, c);
            }
            assertEquals(e[1], lo, "bits " + e[0]);
            assertEquals(e[2], hi, "bits " + e[0]);
        }
        Quantized narrow = Quantizer.linear(8).narrowRange().perTensor().apply(x);
        assertEquals(-127, java.util.Arrays.stream(narrow.codes().toIntArray()).min().getAsInt());
        Quantized u = Quantizer.linear(8).asymmetric().unsigned().perTensor().apply(x);
        assertEquals(0, java.util.Arrays.stream(u.codes().toIntArray()).min().getAsInt());
        assertEquals(255, java.util.Arrays.stream(u.codes().toIntArray()).max().getAsInt());
    }

    @Test
    void uniformDataHasNoiseStepSquaredOverTwelveAndSqnrSixDbPerBit() {
        // Source: textbook uniform-noise model (check-values section 13): noise variance step^2/12; for a
        // full-range uniform input SQNR = 6.02 b dB (a mid-rise grid of 2^b levels spans the range exactly).
        Random rnd = Fixtures.random(11);
        int n = 1_000_000;
        float[] v = new float[n];
        for (int i = 0; i < n; i++) {
            v[i] = (float) (rnd.nextDouble() * 2 - 1);
        }
        Tensor x = Tensor.of(v, n);
        for (int b : new int[] {2, 4, 6, 8}) {
            Quantized r = Quantizer.linear(b).midRise().perTensor().apply(x);
            double step = r.scales().getFlat(0);
            ErrorReport e = r.error();
            assertEquals(step * step / 12, e.mse(), 0.02 * step * step / 12, "bits " + b);
            assertEquals(6.02 * b, e.sqnrDb(), 0.1, "bits " + b);
        }
    }

    @Test
    void perChannelErrorIsFarBelowPerTensorWhenChannelRangesDifferByOrdersOfMagnitude() {
        // Source: common practice (check-values "Facts of the trade"): channel ranges differ by orders of magnitude
        // in compact networks, which per-channel scales absorb.
        Random rnd = Fixtures.random(5);
        int rows = 64;
        int cols = 256;
        float[] v = new float[rows * cols];
        for (int r = 0; r < rows; r++) {
            double scale = Math.pow(10, -3 + 3.0 * r / (rows - 1));
            for (int c = 0; c < cols; c++) {
                v[r * cols + c] = (float) (rnd.nextGaussian() * scale);
            }
        }
        Tensor w = Tensor.of(v, rows, cols);
        for (int b : new int[] {4, 8}) {
            double perTensor = Quantizer.linear(b).perTensor().apply(w).error().mse();
            double perChannel = Quantizer.linear(b).perChannel(0).apply(w).error().mse();
            assertTrue(perChannel < perTensor / 2, b + " bits: " + perChannel + " vs " + perTensor);
            // the smallest channel is wiped out by a per-tensor scale, kept by its own
            double relTensor = Quantizer.linear(b).perTensor().apply(w).error().perChannel().doubleColumn(
                    "rel_frobenius").get(0);
            double relChannel = Quantizer.linear(b).perChannel(0).apply(w).error().perChannel().doubleColumn(
                    "rel_frobenius").get(0);
            assertTrue(relTensor > 0.9, "smallest channel per tensor: " + relTensor);
            assertTrue(relChannel < (b == 4 ? 0.2 : 0.01), "smallest channel per channel: " + relChannel);
        }
    }

    @Test
    void zeroRangeChannelsQuantizeExactly() {
        float[] v = {0f, 0f, 0f, 0.3f, 0.3f, 0.3f, -7.25f, -7.25f, -7.25f, 1e-30f, 1e-30f, 1e-30f};
        Tensor x = named("flat", v, 4, 3);
        Quantizer[] specs = {Quantizer.linear(8), Quantizer.linear(4).asymmetric(),
            Quantizer.linear(8).asymmetric().unsigned(), Quantizer.linear(3).narrowRange(),
            Quantizer.linear(4).range(RangeRule.mse()),
            Quantizer.linear(4).range(RangeRule.percentile(99)), Quantizer.binary().perChannel(0),
            Quantizer.ternary().perChannel(0), Quantizer.logarithmic(4)};
        for (Quantizer q : specs) {
            Quantized r = q.apply(x);
            float[] d = r.dequantized().toFloatArray();
            for (int i = 0; i < v.length; i++) {
                assertTrue(Float.isFinite(d[i]), q + " index " + i);
                if (!q.label().startsWith("uint") || v[i] >= 0) {
                    assertEquals(v[i], d[i], q + " index " + i);
                }
            }
            for (float s : r.scales().toFloatArray()) {
                assertTrue(Float.isFinite(s), q + " scale " + s);
            }
        }
        // a power-of-two scale cannot hit every constant, but zeros stay exact and nothing becomes NaN
        Quantized p = Quantizer.linear(8).powerOfTwoScale().apply(x);
        assertEquals(0f, p.dequantized().getFlat(0));
        assertEquals(0.3, p.dequantized().getFlat(3), p.scales().getFlat(1) / 2);
    }

    @Test
    void extremeAndEmptyInputsGiveFiniteResults() {
        Tensor huge = Tensor.of(new float[] {-3e38f, 3e38f, 1f, Float.MAX_VALUE}, 2, 2);
        Tensor tiny = Tensor.of(new float[] {Float.MIN_VALUE, -Float.MIN_VALUE, 0f, 1e-44f}, 2, 2);
        Tensor empty = Tensor.of(new float[0], 0, 4);
        Tensor scalar = Tensor.of(new float[] {2.5f});
        Quantizer[] specs = {Quantizer.linear(8), Quantizer.linear(4).asymmetric().perTensor(),
            Quantizer.linear(8).range(RangeRule.mse(8)), Quantizer.floatFormat(dev.rungbook.tensor.FloatFormat.E4M3),
            Quantizer.logarithmic(4), Quantizer.ternary(), Quantizer.linear(16).unsigned().asymmetric()};
        for (Quantizer q : specs) {
            for (Tensor t : new Tensor[] {huge, tiny, empty}) {
                Quantized r = q.apply(t);
                for (float d : r.dequantized().toFloatArray()) {
                    assertTrue(Float.isFinite(d), q + " on " + java.util.Arrays.toString(t.toFloatArray()));
                }
                for (double m : r.error().values()) {
                    assertFalse(Double.isNaN(m), q + " metric");
                }
            }
        }
        assertEquals(2.5f, Quantizer.linear(8).perTensor().apply(scalar).dequantized().getFlat(0));
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                () -> Quantizer.linear(8).apply(scalar));
        assertTrue(e.getMessage().contains("axis 0 is out of range for shape []"), e.getMessage());
    }

    @Test
    void refusesNonFiniteValuesNamingTensorAndIndex() {
        Tensor x = named("fc1.weight", new float[] {1f, 2f, Float.NaN, Float.POSITIVE_INFINITY}, 2, 2);
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                () -> Quantizer.linear(8).apply(x));
        assertTrue(e.getMessage().startsWith("tensor 'fc1.weight': value NaN at index 2 [1, 0]"), e.getMessage());
        assertTrue(e.getMessage().contains("int8 sym per-channel(0)"), e.getMessage());
    }

    @Test
    void refusesSpecsThatDoNotFitTheTensorNamingBoth() {
        Tensor w = Tensor.generate(i -> (i % 7) - 3f, 256, 200).withName("fc1.weight");
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                () -> Quantizer.linear(4).perGroup(1, 96).apply(w));
        assertEquals("tensor 'fc1.weight': group size 96 does not divide dimension 1 of shape [256, 200] "
                + "(spec int4 sym per-group(1,96))", e.getMessage());
        IllegalArgumentException a = assertThrows(IllegalArgumentException.class,
                () -> Quantizer.linear(8).perChannel(2).apply(w));
        assertEquals("tensor 'fc1.weight': axis 2 is out of range for shape [256, 200] "
                + "(spec int8 sym per-channel(2))", a.getMessage());
        IllegalArgumentException b = assertThrows(IllegalArgumentException.class, () -> Quantizer.linear(17));
        assertTrue(b.getMessage().contains("2 to 16 bits, got 17"), b.getMessage());
        assertThrows(IllegalArgumentException.class, () -> Quantizer.linear(1));
        assertThrows(IllegalArgumentException.class, () -> Quantizer.binary().range(RangeRule.mse()));
        assertThrows(IllegalArgumentException.class, () -> Quantizer.floatFormat(
                dev.rungbook.tensor.FloatFormat.E4M3).rounding(Rounding.floor()));
        assertThrows(IllegalArgumentException.class, () -> Quantizer.linear(4).asymmetric().midRise());
    }

    @Test
    void labelsAreReadableAndStable() {
        assertEquals("int8 sym per-channel(0)", Quantizer.linear(8).label());
        assertEquals("int4 sym per-group(1,128) mse", Quantizer.linear(4).perGroup(1, 128)
                .range(RangeRule.mse()).label());
        assertEquals("uint8 asym per-tensor p99.9", Quantizer.linear(8).asymmetric().unsigned().perTensor()
                .range(RangeRule.percentile(99.9)).label());
        assertEquals("int8 sym narrow per-channel(0) pow2-scale stochastic(seed=3)", Quantizer.linear(8)
                .narrowRange().powerOfTwoScale().rounding(Rounding.stochastic(3)).label());
        assertEquals("int3 sym midrise per-tensor", Quantizer.linear(3).midRise().perTensor().label());
        assertEquals("fp8-e4m3 per-tensor", Quantizer.floatFormat(dev.rungbook.tensor.FloatFormat.E4M3).label());
        assertEquals("bf16 unscaled", Quantizer.floatFormat(dev.rungbook.tensor.FloatFormat.BF16).unscaled()
                .label());
        assertEquals("log4 per-channel(0)", Quantizer.logarithmic(4).label());
        assertEquals("binary per-tensor", Quantizer.binary().label());
        assertEquals("ternary(0.5) per-channel(0)", Quantizer.ternary().thresholdFactor(0.5).perChannel(0)
                .label());
        assertEquals("int8 sym per-tensor running(0.9)", Quantizer.linear(8).perTensor()
                .range(RangeRule.running(0.9)).label());
    }

    @Test
    void specsAreImmutableValues() {
        Quantizer base = Quantizer.linear(4);
        Quantizer g = base.perGroup(1, 64);
        assertEquals("int4 sym per-channel(0)", base.label(), "fluent steps do not change the original");
        assertNotEquals(base, g);
        assertEquals(g, Quantizer.linear(4).perGroup(1, 64));
        assertEquals(g.hashCode(), Quantizer.linear(4).perGroup(1, 64).hashCode());
        assertEquals(base, base.symmetric());
        assertEquals(Quantizer.linear(8).rounding(Rounding.stochastic(1)),
                Quantizer.linear(8).rounding(Rounding.stochastic(1)));
        assertEquals(g.label(), g.toString());
    }

    @Test
    void bitsPerWeightCountScaleAndZeroPointOverhead() {
        Tensor w = Tensor.of(Fixtures.gaussian(2, 256 * 256), 256, 256);
        // 4-bit codes + one float32 scale per 128 weights = 4.25 bits
        Quantized sym = Quantizer.linear(4).perGroup(1, 128).apply(w);
        assertEquals(4.25, sym.bitsPerWeight(), 1e-12);
        assertEquals(256 * 256 / 2 + 512 * 4, sym.bytes());
        // asymmetric adds a 4-bit zero point per group
        assertEquals(4 + 36.0 / 128, Quantizer.linear(4).asymmetric().perGroup(1, 128).apply(w).bitsPerWeight(),
                1e-12);
        // per channel: 8 + 32/256
        assertEquals(8.125, Quantizer.linear(8).apply(w).bitsPerWeight(), 1e-12);
        // power-of-two scales are stored as an 8-bit exponent
        assertEquals(8 + 8.0 / 256, Quantizer.linear(8).powerOfTwoScale().apply(w).bitsPerWeight(), 1e-12);
        assertEquals(1 + 32.0 / 65536, Quantizer.binary().apply(w).bitsPerWeight(), 1e-12);
    }

    @Test
    void powerOfTwoScalesAreTheNextPowerOfTwoAboveTheMinMaxScale() {
        Tensor w = Tensor.of(Fixtures.gaussian(3, 4 * 100), 4, 100);
        Quantized r = Quantizer.linear(8).powerOfTwoScale().apply(w);
        Quantized plain = Quantizer.linear(8).apply(w);
        for (int c = 0; c < 4; c++) {
            float s = r.scales().getFlat(c);
            float p = plain.scales().getFlat(c);
            assertEquals(Math.scalb(1f, Math.getExponent(s)), s, "a power of two");
            assertTrue(s >= p && s < 2 * p, s + " vs " + p);
        }
    }

    @Test
    void roundingRulesChangeTheCodes() {
        Tensor x = Tensor.of(new float[] {2.1f, -2.1f, 7f}, 3);
        // scale exactly 1
        assertArrayEquals(new int[] {2, -2, 7}, Quantizer.linear(4).perTensor().apply(x).codes().toIntArray());
        assertArrayEquals(new int[] {2, -3, 7}, Quantizer.linear(4).perTensor().rounding(Rounding.floor())
                .apply(x).codes().toIntArray());
        assertArrayEquals(new int[] {3, -2, 7}, Quantizer.linear(4).perTensor().rounding(Rounding.ceil())
                .apply(x).codes().toIntArray());
        assertArrayEquals(new int[] {2, -2, 7}, Quantizer.linear(4).perTensor().rounding(
                Rounding.custom("toward-zero", (v, i) -> v < 0 ? Math.ceil(v) : Math.floor(v))).apply(x).codes()
                .toIntArray());
    }

    @Test
    void stochasticRoundingThroughTheQuantizerIsUnbiased() {
        // Source: E[round(x)] = x for stochastic rounding; mean dequantized value within 3 standard errors.
        int n = 1_000_000;
        float[] v = new float[n + 1];
        java.util.Arrays.fill(v, 0.3f);
        v[n] = 1f;
        Tensor x = Tensor.of(v, n + 1);
        Quantized r = Quantizer.linear(4).perTensor().rounding(Rounding.stochastic(9)).apply(x);
        double s = r.scales().getFlat(0);
        double sum = 0;
        for (int i = 0; i < n; i++) {
            sum += r.dequantized().getFlat(i);
        }
        double f = 0.3 / s - Math.floor(0.3 / s);
        double se = s * Math.sqrt(f * (1 - f) / n);
        assertEquals(0.3, sum / n, 3 * se);
        assertEquals(r.codes(), Quantizer.linear(4).perTensor().rounding(Rounding.stochastic(9)).apply(x).codes(),
                "reproducible for a seed");
    }

    @Test
    void layerRoundingReceivesTheGridAndItsCodesAreChecked() {
        Tensor w = Tensor.of(Fixtures.gaussian(4, 6 * 32), 6, 32).withName("w");
        LayerRounding nearestByGrid = new LayerRounding() {
            @Override
            public String label() {
                return "grid-nearest";
            }

            @Override
            public int[] codes(Tensor weights, GridAssignment grid, Progress progress) {
                float[] d = weights.toFloatArray();
                int[] c = new int[d.length];
                for (int i = 0; i < d.length; i++) {
                    c[i] = grid.nearestCode(i, d[i]);
                }
                return c;
            }
        };
        Quantizer q = Quantizer.linear(4).perGroup(1, 8).asymmetric();
        Quantized viaLayer = q.rounding(nearestByGrid).apply(w);
        Quantized direct = q.apply(w);
        assertEquals(direct.codes(), viaLayer.codes());
        assertEquals(direct.dequantized(), viaLayer.dequantized());
        assertEquals("int4 asym per-group(1,8) grid-nearest", q.rounding(nearestByGrid).label());
        LayerRounding broken = new LayerRounding() {
            @Override
            public String label() {
                return "broken";
            }

            @Override
            public int[] codes(Tensor weights, GridAssignment grid, Progress progress) {
                int[] c = new int[weights.size()];
                c[5] = grid.qmax() + 1;
                return c;
            }
        };
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                () -> Quantizer.linear(4).rounding(broken).apply(w));
        assertTrue(e.getMessage().contains("code 8 at index 5"), e.getMessage());
    }

    @Test
    void reportsProgressAndStopsWhenInterrupted() {
        Tensor w = Tensor.of(Fixtures.gaussian(6, 256 * 16), 256, 16).withName("w");
        AtomicInteger calls = new AtomicInteger();
        Quantizer.linear(4).range(RangeRule.mse(10)).apply(w, (task, done, total, loss) -> {
            calls.incrementAndGet();
            assertEquals(256, total);
            assertTrue(task.contains("w"), task);
        });
        assertTrue(calls.get() >= 4, "progress reported: " + calls.get());
        Thread.currentThread().interrupt();
        try {
            assertThrows(OperationInterruptedException.class, () -> Quantizer.linear(4).apply(w));
        } finally {
            Thread.interrupted();
        }
    }

    @Test
    void fusedDefaultPathAgreesWithTheGeneralPath() {
        // The default spec runs through the fused row kernel (x / s in float32); a custom rule equal to rint takes
        // the general path (x / s in double). They may differ only where x / s lies within float rounding of a tie.
        Tensor w = Tensor.of(Fixtures.gaussian(13, 128 * 300), 128, 300);
        for (Quantizer q : new Quantizer[] {Quantizer.linear(8), Quantizer.linear(4).asymmetric(),
            Quantizer.linear(12).perTensor()}) {
            Quantized fused = q.apply(w);
            Quantized general = q.rounding(Rounding.custom("rint", (x, i) -> Math.rint(x))).apply(w);
            int differ = 0;
            for (int i = 0; i < w.size(); i++) {
                int d = Math.abs(fused.codes().get(i) - general.codes().get(i));
                assertTrue(d <= 1, q + " index " + i);
                differ += d;
            }
            assertTrue(differ <= w.size() / 10_000, q + ": " + differ + " codes differ");
            for (int c = 0; c < fused.segmentCount(); c++) {
                assertEquals(general.scales().getFlat(c), fused.scales().getFlat(c),
                        2 * Math.ulp(general.scales().getFlat(c)), q + " scale " + c);
                assertEquals(general.zeroPoints().getFlat(c), fused.zeroPoints().getFlat(c), q + " zero point " + c);
            }
            assertEquals(general.error().mse(), fused.error().mse(), 1e-3 * general.error().mse());
        }
    }

    @Test
    void codesAreCompactAndRoundTripTheirRange() {
        float[] v = new float[256];
        for (int i = 0; i < 256; i++) {
            v[i] = i;
        }
        Quantized r = Quantizer.linear(8).unsigned().perTensor().apply(Tensor.of(v, 256));
        for (int i = 0; i < 256; i++) {
            assertEquals(i, r.codes().get(i));
        }
        assertEquals(256, r.codes().packedBytes());
        Quantized r4 = Quantizer.linear(4).apply(Tensor.of(v, 16, 16));
        assertEquals(128, r4.codes().packedBytes());
        Quantized r12 = Quantizer.linear(12).perTensor().apply(Tensor.of(v, 256));
        assertEquals(2047, r12.codes().get(255));
        assertEquals(384, r12.codes().packedBytes());
    }

    @Test
    void gridLevelsListEveryRepresentableValue() {
        Quantized r = Quantizer.linear(3).asymmetric().perTensor().apply(Tensor.of(new float[] {0f, 7f}, 2));
        double[] levels = r.gridLevels(0);
        assertEquals(8, levels.length);
        assertEquals(0.0, levels[0]);
        assertEquals(7.0, levels[7], 1e-6);
        assertEquals(1.0, levels[1], 1e-6);
    }

    @Test
    void dequantizedTensorKeepsShapeDtypeAndOwnsItsArray() {
        Tensor w = Tensor.of(Fixtures.gaussian(8, 12), 3, 4).withDType(DType.BF16).withName("b");
        Quantized r = Quantizer.linear(8).apply(w);
        assertArrayEquals(new int[] {3, 4}, r.dequantized().shape());
        assertEquals(DType.BF16, r.dequantized().dtype());
        assertTrue(TensorAccess.data(r.dequantized()) != TensorAccess.data(w));
        assertTrue(r.toString().contains("int8 sym per-channel(0)"), r.toString());
    }
}
