package dev.rungbook.quant;

import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.tensor.FloatFormat;
import dev.rungbook.tensor.Tensor;
import dev.rungbook.testing.Fixtures;
import java.util.ArrayList;
import java.util.Arrays;
import java.util.List;
import org.apache.commons.math3.ml.clustering.CentroidCluster;
import org.apache.commons.math3.ml.clustering.DoublePoint;
import org.apache.commons.math3.ml.clustering.KMeansPlusPlusClusterer;
import org.apache.commons.math3.random.JDKRandomGenerator;
import org.junit.jupiter.api.Test;

class GridsTest {
    private static final int MILLION = 1_000_000;

    // ------------------------------------------------------------------ NF4

    @Test
    void nf4UsesTheQloraLevels() {
        // Source: Dettmers et al., "QLoRA", 2023, the NF4 data type (check-values section 6 [seen]).
        double[] published = {-1.0, -0.6961928009986877, -0.5250730514526367, -0.39491748809814453,
            -0.28444138169288635, -0.18477343022823334, -0.09105003625154495, 0.0, 0.07958029955625534,
            0.16093020141124725, 0.24611230194568634, 0.33791524171829224, 0.44070982933044434, 0.5626170039176941,
            0.7229568362236023, 1.0};
        Quantized r = Quantizer.nf4().apply(Tensor.of(Fixtures.gaussian(1, 128), 2, 64));
        float[] levels = r.levels().orElseThrow().toFloatArray();
        assertEquals(16, levels.length);
        for (int i = 0; i < 16; i++) {
            assertEquals(published[i], levels[i], 2e-7, "level " + i);
        }
    }

    @Test
    void nf4WorkedBlockAndOverhead() {
        // Worked by hand from the QLoRA recipe: absmax scaling per block of 64, nearest level.
        // Block max 2: 1.0 / 2 = 0.5 lies between 0.4407 (|d| = 0.0593) and 0.5626 (|d| = 0.0626) -> level 12;
        // -2 -> level 0 (-1); 0 -> level 7; 0.7 / 2 = 0.35 -> 0.3379 (level 11).
        float[] v = new float[64];
        v[0] = 1f;
        v[1] = -2f;
        v[2] = 0f;
        v[3] = 0.7f;
        Quantized r = Quantizer.nf4().apply(Tensor.of(v, 1, 64));
        assertEquals(2f, r.scales().getFlat(0));
        assertArrayEquals(new int[] {12, 0, 7, 11}, Arrays.copyOf(r.codes().toIntArray(), 4));
        assertEquals((float) (2 * 0.44070982933044434), r.dequantized().getFlat(0), 1e-6);
        assertEquals(-2f, r.dequantized().getFlat(1));
        // Source: QLoRA section 3 [memory]: 32-bit absmax constants per block of 64 add 32/64 = 0.5 bits per weight.
        Quantized big = Quantizer.nf4().apply(Tensor.of(Fixtures.gaussian(2, 64 * 64), 64, 64));
        assertEquals(4.5, big.bitsPerWeight(), 1e-12);
        assertEquals("nf4 per-group(last,64)", Quantizer.nf4().label());
        assertEquals("nf4 per-group(last,128)", Quantizer.nf4().blockSize(128).label());
    }

    // ------------------------------------------------------------------ MX

    @Test
    void mxfp4ReproducesTheSpecWorkedExamples() {
        // Source: OCP Microscaling Formats (MX) v1.0, 2023, shared scale rule (check-values section 4 [seen];
        // worked values [computed]): E2M1 block max 7 -> scale 1, 7 -> 6; block max 0.3 -> scale 2^-4,
        // 0.3 / 2^-4 = 4.8 -> 4, reconstructs 0.25.
        float[] v = new float[64];
        v[0] = 7f;
        v[1] = 1.25f; // -> 1 (ties to even between 1 and 1.5)
        v[32] = 0.3f;
        v[33] = -0.1f; // 0.1 / 2^-4 = 1.6 -> 1.5 -> -0.09375
        Quantized r = Quantizer.mx(FloatFormat.E2M1).apply(Tensor.of(v, 2, 32));
        assertEquals(1f, r.scales().getFlat(0));
        assertEquals(0.0625f, r.scales().getFlat(1));
        assertEquals(6f, r.dequantized().getFlat(0));
        assertEquals(1f, r.dequantized().getFlat(1));
        assertEquals(0.25f, r.dequantized().getFlat(32));
        assertEquals(-0.09375f, r.dequantized().getFlat(33));
        assertEquals(FloatFormat.E2M1.encode(6f), r.codes().get(0));
        // 32 four-bit elements + one 8-bit E8M0 scale = 4.25 bits per element
        assertEquals(4.25, r.bitsPerWeight(), 1e-12);
        assertEquals("mxfp4-e2m1 per-group(last,32)", Quantizer.mx(FloatFormat.E2M1).label());
    }

    @Test
    void mxfp8AndMxint8FollowTheSharedExponentRule() {
        // Source: OCP MX v1.0: shared_exp = floor(log2(max|v|)) - emax (E4M3 emax 8); INT8 elements carry an implicit
        // 2^-6 (check-values section 4); emax of INT8 taken as 0 (elements below 2) [memory].
        float[] v = new float[32];
        v[0] = 1f;
        v[1] = 0.3f;
        Quantized f8 = Quantizer.mx(FloatFormat.E4M3).apply(Tensor.of(v, 32));
        assertEquals(Math.scalb(1f, -8), f8.scales().getFlat(0));
        assertEquals(1f, f8.dequantized().getFlat(0));
        // 0.3 * 256 = 76.8 -> E4M3 spacing 8 in [64, 128): 80 -> 0.3125
        assertEquals(0.3125f, f8.dequantized().getFlat(1));
        float[] w = new float[32];
        w[0] = 1.5f;
        w[1] = 0.01f;
        w[2] = -1.99f;
        Quantized i8 = Quantizer.mxInt8().apply(Tensor.of(w, 1, 32));
        assertEquals(1f, i8.scales().getFlat(0));
        assertEquals(96, i8.codes().get(0));
        assertEquals(1, i8.codes().get(1));
        assertEquals(-127, i8.codes().get(2)); // -1.99 * 64 = -127.36
        assertEquals(1f / 64, i8.dequantized().getFlat(1));
        assertEquals(8.25, i8.bitsPerWeight(), 1e-12);
        assertThrows(IllegalArgumentException.class, () -> Quantizer.mx(FloatFormat.BF16));
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                () -> Quantizer.mxInt8().apply(Tensor.of(new float[40], 40).withName("odd")));
        assertTrue(e.getMessage().contains("group size 32 does not divide dimension 0 of shape [40]"),
                e.getMessage());
    }

    // ------------------------------------------------------------------ float formats

    @Test
    void unscaledFloatFormatsAreExactCasts() {
        // Source: OFP8 rev 1.0 and bfloat16 (check-values sections 3 and 5): E4M3 saturating conversion clamps to
        // 448, |x| <= 464 rounds to 448; fp32 0x3F808000 -> bf16 0x3F80, 0x3F818000 -> 0x3F82, pi -> 0x4049.
        Tensor x = Tensor.of(new float[] {464f, 500f, -1e6f, 0.013671875f, Math.scalb(1f, -10)}, 5);
        Quantized e4 = Quantizer.floatFormat(FloatFormat.E4M3).unscaled().apply(x);
        assertArrayEquals(new float[] {448f, 448f, -448f, 0.013671875f, 0f}, e4.dequantized().toFloatArray());
        assertEquals(0, e4.overheadBits());
        Tensor y = Tensor.of(new float[] {Float.intBitsToFloat(0x3F808000), Float.intBitsToFloat(0x3F818000),
            (float) Math.PI}, 3);
        Quantized bf = Quantizer.floatFormat(FloatFormat.BF16).unscaled().apply(y);
        assertArrayEquals(new int[] {0x3F80, 0x3F82, 0x4049}, bf.codes().toIntArray());
        assertEquals(16.0, bf.bitsPerWeight());
    }

    @Test
    void scaledFloatFormatMapsEachChannelMaximumToTheFormatMaximum() {
        Tensor w = Tensor.of(Fixtures.gaussian(4, 8 * 64), 8, 64);
        Quantized r = Quantizer.floatFormat(FloatFormat.E4M3).perChannel(0).apply(w);
        for (int c = 0; c < 8; c++) {
            float[] row = w.channel(0, c).toFloatArray();
            float amax = 0;
            int at = 0;
            for (int i = 0; i < row.length; i++) {
                if (Math.abs(row[i]) > amax) {
                    amax = Math.abs(row[i]);
                    at = i;
                }
            }
            assertEquals(amax / 448.0, r.scales().getFlat(c), 1e-6 * amax / 448);
            assertEquals(row[at], r.dequantized().get(c, at), "the channel maximum is exact");
        }
        // E4M3 keeps 3 mantissa bits: relative error at most 2^-4 for normal values
        assertTrue(r.error().relativeFrobenius() < 0.0625, "rel error " + r.error().relativeFrobenius());
        assertEquals(8 + 32.0 / 64, r.bitsPerWeight(), 1e-12);
    }

    // ------------------------------------------------------------------ codebooks

    @Test
    void codebookReproducesLloydMaxGaussianLevelsAndMse() {
        // Source: J. Max 1960, minimum-MSE quantizers of a unit Gaussian (check-values section 1 [computed]):
        // positive levels and MSE for N = 2, 4, 8, 16; checked within 1e-3 on 10^6 seeded values.
        Tensor x = Samples.gaussian(1960, MILLION);
        double[][] levels = {{0.7979}, {0.4528, 1.5104}, {0.2451, 0.7560, 1.3439, 2.1520},
            {0.1284, 0.3881, 0.6568, 0.9423, 1.2562, 1.6180, 2.0690, 2.7326}};
        double[] mse = {0.3634, 0.11748, 0.034548, 0.009501};
        for (int t = 0; t < 4; t++) {
            int k = 2 << t;
            Quantized r = Quantizer.codebook(k).apply(x);
            float[] l = r.levels().orElseThrow().toFloatArray();
            for (int j = 0; j < k / 2; j++) {
                assertEquals(levels[t][j], l[k / 2 + j], Fixtures.TABLE_4_DIGITS, "k " + k + " level " + j);
                assertEquals(-levels[t][j], l[k / 2 - 1 - j], Fixtures.TABLE_4_DIGITS, "k " + k + " level -" + j);
            }
            assertEquals(mse[t], r.error().mse(), Fixtures.TABLE_4_DIGITS, "k " + k + " mse");
            assertEquals(mse[t], r.error().mse(), 0.01 * mse[t], "k " + k + " mse within 1%");
        }
    }

    @Test
    void codebookReproducesPaezGlissonLaplacianLevels() {
        // Source: P. Paez & T. Glisson, IEEE Trans. Commun. COM-20, 1972 (check-values section 1 [computed]):
        // unit-variance Laplacian, N = 4 levels 0.4198, 1.8340, MSE 0.17620; N = 8 levels 0.2334, 0.8330, 1.6725,
        // 3.0867, MSE 0.05448. The Laplacian's long tail puts more sampling noise on the top level: 3e-3 there.
        Tensor x = Samples.laplace(1972, MILLION);
        Quantized r4 = Quantizer.codebook(4).apply(x);
        float[] l4 = r4.levels().orElseThrow().toFloatArray();
        assertEquals(0.4198, l4[2], Fixtures.TABLE_4_DIGITS);
        assertEquals(1.8340, l4[3], Fixtures.TABLE_4_DIGITS);
        assertEquals(0.17620, r4.error().mse(), Fixtures.TABLE_4_DIGITS);
        Quantized r8 = Quantizer.codebook(8).apply(x);
        float[] l8 = r8.levels().orElseThrow().toFloatArray();
        double[] expect = {0.2334, 0.8330, 1.6725, 3.0867};
        for (int j = 0; j < 4; j++) {
            assertEquals(expect[j], l8[4 + j], j == 3 ? 3e-3 : Fixtures.TABLE_4_DIGITS, "level " + j);
        }
        assertEquals(0.05448, r8.error().mse(), Fixtures.TABLE_4_DIGITS);
    }

    @Test
    void codebookIsNeverWorseThanCommonsMathKMeansPlusPlus() {
        // Source: commons-math3 KMeansPlusPlusClusterer (a general k-means++ with Lloyd refinement) as the reference
        // an optimal 1-D solver must match or beat.
        for (int trial = 0; trial < 10; trial++) {
            float[] v = Fixtures.gaussian(100 + trial, 300);
            for (int i = 0; i < v.length; i += 7) {
                v[i] *= 4; // heavier tails make local optima likelier
            }
            int k = 3 + trial % 6;
            Quantized r = Quantizer.codebook(k).apply(Tensor.of(v, v.length));
            List<DoublePoint> pts = new ArrayList<>();
            for (float f : v) {
                pts.add(new DoublePoint(new double[] {f}));
            }
            JDKRandomGenerator g = new JDKRandomGenerator();
            g.setSeed(trial);
            KMeansPlusPlusClusterer<DoublePoint> km = new KMeansPlusPlusClusterer<>(k, 1000,
                    new org.apache.commons.math3.ml.distance.EuclideanDistance(), g);
            double sse = 0;
            for (CentroidCluster<DoublePoint> c : km.cluster(pts)) {
                double center = c.getCenter().getPoint()[0];
                for (DoublePoint p : c.getPoints()) {
                    double d = p.getPoint()[0] - center;
                    sse += d * d;
                }
            }
            double ours = r.error().mse() * v.length;
            assertTrue(ours <= sse * (1 + 1e-6) + 1e-9, "trial " + trial + ": " + ours + " vs k-means++ " + sse);
        }
    }

    @Test
    void codebookRefusesMoreLevelsThanDistinctValuesNamingTensorAndSpec() {
        Tensor x = Tensor.of(new float[] {1f, 1f, 2f, 3f, 3f}, 5).withName("emb");
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                () -> Quantizer.codebook(4).apply(x));
        assertTrue(e.getMessage().contains("tensor 'emb'") && e.getMessage().contains("codebook4 per-tensor")
                && e.getMessage().contains("3 distinct"), e.getMessage());
        Quantized ok = Quantizer.codebook(3).apply(x);
        assertEquals(x, ok.dequantized(), "three levels reproduce three distinct values exactly");
        // 2-bit codes + three float32 levels
        assertEquals((5 * 2 + 96) / 5.0, ok.bitsPerWeight(), 1e-12);
    }

    @Test
    void perChannelCodebooksFitEachChannel() {
        Tensor w = Tensor.of(Fixtures.gaussian(12, 4 * 500), 4, 500);
        Quantized r = Quantizer.codebook(4).perChannel(0).apply(w);
        assertArrayEquals(new int[] {4, 4}, r.levels().orElseThrow().shape());
        Quantized one = Quantizer.codebook(4).apply(Tensor.of(w.channel(0, 1).toFloatArray(), 500));
        float[] l = r.levels().orElseThrow().toFloatArray();
        float[] l1 = one.levels().orElseThrow().toFloatArray();
        for (int j = 0; j < 4; j++) {
            assertEquals(l1[j], l[4 + j], 1e-6);
        }
    }

    // ------------------------------------------------------------------ binary, ternary, log

    @Test
    void binaryMatchesXnorNetAndMaxsOneBitQuantizer() {
        // Source: Rastegari et al., XNOR-Net, 2016 [memory]: B = sign(W), alpha = ||W||_1 / n (check-values
        // section 11). For N(0,1), alpha -> E|x| = sqrt(2/pi) = 0.7979 and MSE -> 1 - 2/pi = 0.3634, Max's
        // 2-level optimum (section 1).
        Tensor w = Tensor.of(Fixtures.gaussian(21, 6 * 50), 6, 50);
        Quantized r = Quantizer.binary().perChannel(0).apply(w);
        for (int c = 0; c < 6; c++) {
            float[] row = w.channel(0, c).toFloatArray();
            double l1 = 0;
            for (float f : row) {
                l1 += Math.abs(f);
            }
            float alpha = (float) (l1 / row.length);
            assertEquals(alpha, r.scales().getFlat(c));
            for (int i = 0; i < row.length; i++) {
                assertEquals(row[i] >= 0 ? alpha : -alpha, r.dequantized().get(c, i));
                assertEquals(row[i] >= 0 ? 1 : -1, r.codes().get(c * 50 + i));
            }
        }
        Quantized g = Quantizer.binary().apply(Samples.gaussian(5, MILLION));
        assertEquals(Math.sqrt(2 / Math.PI), g.scales().getFlat(0), Fixtures.TABLE_4_DIGITS);
        assertEquals(1 - 2 / Math.PI, g.error().mse(), Fixtures.TABLE_4_DIGITS);
    }

    @Test
    void ternaryMatchesTwnFormulas() {
        // Source: Li, Zhang, Liu, "Ternary Weight Networks", 2016 (check-values section 11 [seen]):
        // delta = 0.7 mean|W|, alpha = mean |W_i| over |W_i| > delta. Worked: mean|w| = 3.85 / 6, delta = 0.44917;
        // kept -0.9, 0.5, 2.0 -> alpha = 3.4 / 3.
        Tensor w = Tensor.of(new float[] {0.1f, -0.9f, 0.5f, 2.0f, -0.05f, 0.3f}, 6);
        Quantized r = Quantizer.ternary().apply(w);
        assertArrayEquals(new int[] {0, -1, 1, 1, 0, 0}, r.codes().toIntArray());
        assertEquals(3.4 / 3, r.scales().getFlat(0), 1e-6);
        assertEquals(-3.4 / 3, r.dequantized().getFlat(1), 1e-6);
        // factor 0.1: delta = 0.0642 -> only -0.05 dropped; alpha = 3.8 / 5
        Quantized loose = Quantizer.ternary().thresholdFactor(0.1).apply(w);
        assertArrayEquals(new int[] {1, -1, 1, 1, 0, 1}, loose.codes().toIntArray());
        assertEquals(3.8 / 5, loose.scales().getFlat(0), 1e-6);
        assertEquals(2 + 32.0 / 6, r.bitsPerWeight(), 1e-12);
    }

    @Test
    void logarithmicGridRoundsToTheNearestPowerOfTwo() {
        // 3 bits: levels 0, +-1, +-1/2, +-1/4 times the absmax 1. 0.3 -> 0.25; -0.6 -> -0.5; 0.1 -> 0;
        // 0.13 -> 0.125 is not a level, nearest is 0.25 (0.12 away) vs 0 (0.13 away) -> 0.25.
        Tensor x = Tensor.of(new float[] {1f, 0.3f, -0.6f, 0.1f, 0.13f, 0f}, 6);
        Quantized r = Quantizer.logarithmic(3).perTensor().apply(x);
        assertArrayEquals(new float[] {1f, 0.25f, -0.5f, 0f, 0.25f, 0f}, r.dequantized().toFloatArray());
        assertArrayEquals(new double[] {-1, -0.5, -0.25, 0, 0.25, 0.5, 1}, r.gridLevels(0));
        assertEquals(7, r.levels().orElseThrow().size());
    }
}
