package dev.rungbook.metrics;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertFalse;
import static org.junit.jupiter.api.Assertions.assertNotNull;
import static org.junit.jupiter.api.Assertions.assertNull;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;
import static org.junit.jupiter.api.Assumptions.assumeTrue;

import dev.rungbook.quant.Quantizer;
import dev.rungbook.tensor.Tensor;
import dev.rungbook.testing.Fixtures;
import java.nio.charset.StandardCharsets;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.ArrayList;
import java.util.Arrays;
import java.util.List;
import java.util.Random;
import org.junit.jupiter.api.Test;

/**
 * The KL histograms of {@link ErrorReport} counted branch-free in one pass, and from a shared
 * {@link ErrorReport.Reference}: the same numbers as the per-value clamped formula they replace, as NumPy's count
 * with the documented bin formula, and as a hand-worked case.
 */
class KlHistogramTest {

    /** The histogram code before this change, kept here as the reference: min/max first, each index clamped. */
    private static double previousKl(float[] x, float[] y, int bins) {
        if (x.length == 0) {
            return 0;
        }
        float mn = Float.POSITIVE_INFINITY;
        float mx = Float.NEGATIVE_INFINITY;
        for (float v : x) {
            mn = Math.min(mn, v);
            mx = Math.max(mx, v);
        }
        for (float v : y) {
            mn = Math.min(mn, v);
            mx = Math.max(mx, v);
        }
        double lo = mn;
        double hi = mx;
        double norm = hi > lo ? bins / (hi - lo) : 0;
        long[] p = new long[bins];
        long[] q = new long[bins];
        for (int i = 0; i < x.length; i++) {
            p[clampedBin(x[i], lo, norm, bins)]++;
            q[clampedBin(y[i], lo, norm, bins)]++;
        }
        if (Arrays.equals(p, q)) {
            return 0;
        }
        double n = x.length;
        double kl = 0;
        for (int k = 0; k < bins; k++) {
            if (p[k] == 0) {
                continue;
            }
            double pb = p[k] / n;
            double qb = (1 - ErrorReport.KL_MIX) * (q[k] / n) + ErrorReport.KL_MIX / bins;
            kl += pb * Math.log(pb / qb);
        }
        return Math.max(0, kl);
    }

    private static int clampedBin(float v, double lo, double norm, int bins) {
        int b = (int) ((v - lo) * norm);
        return b < 0 ? 0 : (b >= bins ? bins - 1 : b);
    }

    private static float[] bf16(float[] v) {
        float[] r = new float[v.length];
        for (int i = 0; i < v.length; i++) {
            r[i] = Float.intBitsToFloat(Float.floatToRawIntBits(v[i]) & 0xFFFF0000);
        }
        return r;
    }

    /** Pairs (x, y) that probe the edges: ranges from either side, constants, +-0, subnormals, huge values. */
    private static List<float[][]> cases() {
        Random r = Fixtures.random(11);
        List<float[][]> c = new ArrayList<>();
        for (int n : new int[] {1, 2, 3, 255, 256, 257, 4095, 4097, 20001}) {
            float[] x = new float[n];
            float[] y = new float[n];
            float[] z = new float[n];
            for (int i = 0; i < n; i++) {
                x[i] = (float) r.nextGaussian();
                y[i] = (float) (x[i] + 0.3 * r.nextGaussian()); // reaches past x's range
                z[i] = (float) (0.5 * x[i]); // inside x's range
            }
            c.add(new float[][] {x, y});
            c.add(new float[][] {x, z});
            c.add(new float[][] {z, x});
            c.add(new float[][] {x, x.clone()});
            c.add(new float[][] {bf16(x), y});
            c.add(new float[][] {bf16(x), bf16(z)});
        }
        float[] constant = new float[300];
        Arrays.fill(constant, 0.75f);
        float[] other = constant.clone();
        other[7] = -2f;
        c.add(new float[][] {constant, constant.clone()});
        c.add(new float[][] {constant, other});
        c.add(new float[][] {other, constant});
        // -0.0 and +0.0 as the ends of the range, and as values
        c.add(new float[][] {{-0f, 0f, 1f, 0.5f}, {0f, 0f, 1f, 1f}});
        c.add(new float[][] {{-1f, -0f, -0.5f, -0f}, {-1f, 0f, -0f, -0.25f}});
        c.add(new float[][] {{-0f, -0f}, {0f, 0f}});
        // subnormals only: a range of a few ulps of Float.MIN_VALUE
        c.add(new float[][] {{Float.MIN_VALUE, 0f, 3 * Float.MIN_VALUE, 2 * Float.MIN_VALUE},
            {0f, Float.MIN_VALUE, 5 * Float.MIN_VALUE, Float.MIN_VALUE}});
        // the widest finite range, values on and next to both ends
        float big = Float.MAX_VALUE;
        c.add(new float[][] {{-big, big, 0f, Math.nextDown(big), Math.nextUp(-big), 1f},
            {big, -big, big, 1e38f, -1e38f, -big}});
        // values one ulp under the top, where fl((v - lo) * norm) can reach the number of bins
        float[] near = new float[1000];
        float[] nearY = new float[1000];
        for (int i = 0; i < near.length; i++) {
            near[i] = Math.nextDown(1f) - i * Math.ulp(1f) * 0.5f;
            nearY[i] = i % 3 == 0 ? 1f : -0.1f * (1 + i % 7) / 7f;
        }
        c.add(new float[][] {near, nearY});
        return c;
    }

    @Test
    void onePassCountsEqualThePreviousClampedFormulaBitForBit() {
        for (float[][] xy : cases()) {
            double expected = previousKl(xy[0], xy[1], ErrorReport.KL_BINS);
            double direct = ErrorReport.klDivergence(xy[0], xy[1], ErrorReport.KL_BINS);
            double viaReport = ErrorReport.of(Tensor.of(xy[0], xy[0].length), Tensor.of(xy[1], xy[1].length))
                    .klDivergence();
            double viaShared = ErrorReport.of(ErrorReport.reference(Tensor.of(xy[0], xy[0].length)),
                    Tensor.of(xy[1], xy[1].length)).klDivergence();
            String what = "n = " + xy[0].length + ", x starts " + Arrays.toString(Arrays.copyOf(xy[0], 3));
            assertEquals(Double.doubleToRawLongBits(expected), Double.doubleToRawLongBits(direct), what);
            assertEquals(Double.doubleToRawLongBits(expected), Double.doubleToRawLongBits(viaReport), what);
            assertEquals(Double.doubleToRawLongBits(expected), Double.doubleToRawLongBits(viaShared), what);
        }
    }

    @Test
    void theseCasesAreNotTrivial() {
        // the comparison above would be weak if most cases gave 0
        int positive = 0;
        for (float[][] xy : cases()) {
            if (previousKl(xy[0], xy[1], ErrorReport.KL_BINS) > 0) {
                positive++;
            }
        }
        assertTrue(positive > 40, positive + " cases with a positive divergence");
    }

    @Test
    void bf16PatternCountsAreTakenOnlyForBf16Values() {
        float[] x = Fixtures.gaussian(4, 10_000);
        assertNull(ErrorReport.bf16Counts(x));
        float[] b = bf16(x);
        int[] counts = ErrorReport.bf16Counts(b);
        assertNotNull(counts);
        assertEquals(b.length, Arrays.stream(counts).asLongStream().sum());
        assertEquals(1, counts[Float.floatToRawIntBits(b[17]) >>> 16] > 0 ? 1 : 0);
        // a single non-bf16 value after the first 4096 still turns the counts off
        float[] late = b.clone();
        late[9000] = Math.nextUp(late[9000]);
        assertNull(ErrorReport.bf16Counts(late));
        assertTrue(ErrorReport.reference(Tensor.of(b, b.length)).countsValues());
        assertFalse(ErrorReport.reference(Tensor.of(late, late.length)).countsValues());
        assertNotNull(ErrorReport.bf16Counts(new float[0]));
    }

    @Test
    void aSharedReferenceGivesEveryMetricBitForBit() {
        Tensor f32 = Tensor.of(Fixtures.gaussian(5, 64 * 256), 64, 256).withName("w");
        Tensor b16 = Tensor.of(bf16(Fixtures.gaussian(6, 64 * 256)), 64, 256).withName("wb");
        Quantizer[] specs = {Quantizer.linear(8), Quantizer.linear(4).perGroup(1, 128), Quantizer.nf4(),
            Quantizer.parse("fp8-e4m3 per-channel(0)"), Quantizer.codebook(16), Quantizer.linear(3).asymmetric()};
        for (Tensor t : new Tensor[] {f32, b16}) {
            ErrorReport.Reference ref = ErrorReport.reference(t);
            assertEquals(t == b16, ref.countsValues());
            for (Quantizer q : specs) {
                Tensor y = q.apply(t).dequantized();
                double[] expected = ErrorReport.of(t, y).values();
                double[] got = ErrorReport.of(ref, y).values();
                for (int k = 0; k < expected.length; k++) {
                    assertEquals(Double.doubleToRawLongBits(expected[k]), Double.doubleToRawLongBits(got[k]),
                            t.name() + " " + q.label() + " " + ErrorReport.METRICS.get(k));
                }
                assertTrue(got[8] > 0, q.label());
            }
        }
        assertThrows(IllegalArgumentException.class, () -> ErrorReport.of(ErrorReport.reference(f32),
                Tensor.of(new float[64 * 256], 256, 64)));
    }

    @Test
    void handWorkedTwoBinCaseThroughASharedReference() {
        // x = [0, 0, 1, 1] (bf16 numbers, so counted per pattern), y = [0, 1, 1, 1]: 256 bins over [0, 1], x in the
        // end bins with P = (1/2, 1/2), Q = (1/4, 3/4); with Q' = (1 - 1e-6) Q + 1e-6 / 256:
        // KL = 1/2 ln(1/2 / Q'_0) + 1/2 ln(1/2 / Q'_255), worked by hand from the class description's formula.
        ErrorReport.Reference ref = ErrorReport.reference(Tensor.of(new float[] {0, 0, 1, 1}, 4));
        assertTrue(ref.countsValues());
        double q0 = (1 - 1e-6) * 0.25 + 1e-6 / 256;
        double q1 = (1 - 1e-6) * 0.75 + 1e-6 / 256;
        double expected = 0.5 * Math.log(0.5 / q0) + 0.5 * Math.log(0.5 / q1);
        assertEquals(expected, ErrorReport.of(ref, Tensor.of(new float[] {0, 1, 1, 1}, 4)).klDivergence(), 1e-15);
        // Source: hand computation, 1/2 ln 2 + 1/2 ln(2/3) = 0.14384103622589045 before the 1e-6 mixture.
        assertEquals(0.14384103622589045, expected, 2e-6);
    }

    @Test
    void matchesNumpyCountingWithTheDocumentedBinFormula() throws Exception {
        // Source: NumPy (float64 arithmetic) with the class description's bin floor((v - lo) * 256 / (hi - lo)),
        // top bin closed, and a Python loop summing the bins in order. The counts are then the same integers; the
        // sums differ only if Python's libm log and Java's Math.log round a term differently (1 ulp at most), hence
        // the 1e-14 relative tolerance.
        String py = Fixtures.pythonWithNumpy();
        assumeTrue(py != null, "python3 with numpy not found");
        Random rnd = Fixtures.random(8);
        int n = 30_000;
        float[] x = new float[n];
        float[] y = new float[n];
        StringBuilder sx = new StringBuilder();
        StringBuilder sy = new StringBuilder();
        for (int i = 0; i < n; i++) {
            x[i] = Float.intBitsToFloat(Float.floatToRawIntBits((float) rnd.nextGaussian()) & 0xFFFF0000);
            y[i] = (float) (Math.rint(x[i] * 8) / 8);
            sx.append(Float.toString(x[i])).append('\n');
            sy.append(Float.toString(y[i])).append('\n');
        }
        Path dir = Fixtures.tempDir("klbins");
        Path fx = dir.resolve("x.txt");
        Path fy = dir.resolve("y.txt");
        Files.writeString(fx, sx, StandardCharsets.US_ASCII);
        Files.writeString(fy, sy, StandardCharsets.US_ASCII);
        String script = String.join("\n",
                "import sys, math, numpy as np",
                "x = np.loadtxt(sys.argv[1], dtype=np.float32).astype(np.float64)",
                "y = np.loadtxt(sys.argv[2], dtype=np.float32).astype(np.float64)",
                "lo = min(x.min(), y.min()); hi = max(x.max(), y.max()); norm = 256 / (hi - lo)",
                "p = np.bincount(np.minimum(np.floor((x - lo) * norm).astype(np.int64), 255), minlength=256)",
                "q = np.bincount(np.minimum(np.floor((y - lo) * norm).astype(np.int64), 255), minlength=256)",
                "kl = 0.0",
                "for k in range(256):",
                "    if p[k]:",
                "        pb = int(p[k]) / len(x); qb = (1 - 1e-6) * (int(q[k]) / len(y)) + 1e-6 / 256",
                "        kl += pb * math.log(pb / qb)",
                "print(repr(kl))");
        double expected = Double.parseDouble(Fixtures.runPython(py, script, fx.toString(), fy.toString()).trim());
        ErrorReport.Reference ref = ErrorReport.reference(Tensor.of(x, n));
        assertTrue(ref.countsValues());
        double shared = ErrorReport.of(ref, Tensor.of(y, n)).klDivergence();
        double plain = ErrorReport.of(Tensor.of(x, n), Tensor.of(y, n)).klDivergence();
        assertEquals(expected, shared, 1e-14 * expected);
        assertEquals(Double.doubleToRawLongBits(plain), Double.doubleToRawLongBits(shared));
        assertTrue(shared > 0.001, "rounding to 1/8 changes the histogram: " + shared);
    }
}
