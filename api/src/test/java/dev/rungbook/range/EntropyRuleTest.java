package dev.rungbook.range;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertTrue;
import static org.junit.jupiter.api.Assumptions.assumeTrue;

import dev.rungbook.quant.Quantized;
import dev.rungbook.quant.Quantizer;
import dev.rungbook.quant.Samples;
import dev.rungbook.tensor.Tensor;
import dev.rungbook.testing.Fixtures;
import java.nio.charset.StandardCharsets;
import java.nio.file.Files;
import java.nio.file.Path;
import org.junit.jupiter.api.Test;

class EntropyRuleTest {
    /**
     * The published entropy-calibration loop (check-values section 10: 2048-bin histogram of |x|; for i in
     * 128..2047, P = bins[0, i) with the outliers added to P[i-1], Q = bins[0, i) merged into 128 levels and expanded
     * over P's non-empty bins, minimise KL(P || Q); threshold (i + 0.5) * width), written independently in NumPy.
     */
    private static final String NUMPY_LOOP = String.join("\n",
            "import sys, numpy as np",
            "x = np.abs(np.loadtxt(sys.argv[1], dtype=np.float32).astype(np.float64))",
            "B, L = 2048, 128",
            "m = x.max(); w = m / B",
            "h = np.minimum(np.floor(x / m * B), B - 1).astype(np.int64)",
            "hist = np.bincount(h, minlength=B).astype(np.float64)",
            "best, bi = np.inf, -1",
            "with np.errstate(divide='ignore', invalid='ignore'):",
            "    for i in range(L, B):",
            "        p = hist[:i].copy(); p[i - 1] += hist[i:].sum()",
            "        per = i // L; nz = p != 0",
            "        lev = np.minimum(np.arange(i) // per, L - 1)",
            "        sums = np.bincount(lev, weights=hist[:i], minlength=L)",
            "        cnt = np.bincount(lev, weights=nz.astype(np.float64), minlength=L)",
            "        share = np.where(cnt > 0, sums / np.where(cnt > 0, cnt, 1), 0)",
            "        q = np.where(nz, share[lev], 0)",
            "        pn = p / p.sum(); qn = q / q.sum(); k = pn > 0",
            "        d = np.sum(pn[k] * np.log(pn[k] / qn[k]))",
            "        if d < best: best, bi = d, i",
            "print(repr(float((bi + 0.5) * w)))");

    @Test
    void entropyRuleMatchesAnIndependentNumpyImplementationOfThePublishedLoop() throws Exception {
        String py = Fixtures.pythonWithNumpy();
        assumeTrue(py != null, "python3 with numpy not found");
        Tensor x = Samples.laplace(10, 50_000);
        StringBuilder sb = new StringBuilder();
        for (float f : x.toFloatArray()) {
            sb.append(Float.toString(f)).append('\n');
        }
        Path f = Fixtures.tempDir("entropy").resolve("x.txt");
        Files.writeString(f, sb, StandardCharsets.US_ASCII);
        double t = Double.parseDouble(Fixtures.runPython(py, NUMPY_LOOP, f.toString()).trim());
        Quantized r = Quantizer.linear(8).perTensor().range(RangeRule.entropy()).apply(x);
        assertEquals(t / 127, r.scales().getFlat(0), 1e-9 * t);
        double max = 0;
        for (float v : x.toFloatArray()) {
            max = Math.max(max, Math.abs(v));
        }
        assertTrue(t < max, "heavy tails are clipped: " + t + " < " + max);
    }

    @Test
    void entropyRuleWorksPerChannelAndOnDegenerateSegments() {
        float[] v = new float[4 * 5000];
        float[] g = Fixtures.gaussian(4, 3 * 5000);
        System.arraycopy(g, 0, v, 5000, g.length); // channel 0 all zeros
        Tensor w = Tensor.of(v, 4, 5000);
        Quantized r = Quantizer.linear(8).range(RangeRule.entropy()).apply(w);
        assertEquals(1f, r.scales().getFlat(0), "zero channel: the zero-range scale");
        for (int c = 1; c < 4; c++) {
            float s = r.scales().getFlat(c);
            assertTrue(s > 1.0 / 127 && s < 5.0 / 127, "channel " + c + " threshold " + s * 127);
        }
        assertEquals("int8 sym per-channel(0) entropy", Quantizer.linear(8).range(RangeRule.entropy()).label());
    }
}
