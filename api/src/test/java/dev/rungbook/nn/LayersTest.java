package dev.rungbook.nn;

import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;
import static org.junit.jupiter.api.Assumptions.assumeTrue;

import dev.rungbook.io.Checkpoint;
import dev.rungbook.tensor.Tensor;
import dev.rungbook.testing.Fixtures;
import java.io.IOException;
import java.nio.file.Path;
import java.util.LinkedHashMap;
import java.util.Map;
import java.util.Random;
import org.junit.jupiter.api.Test;

class LayersTest {
    static Tensor random(long seed, int... shape) {
        int n = 1;
        for (int d : shape) {
            n *= d;
        }
        return Tensor.of(Fixtures.gaussian(seed, n), shape);
    }

    @Test
    void convolutionReproducesAWorkedExample() {
        // Source: worked by hand. Input 1..9 as a 3x3 image, kernel [[1, 0], [0, -1]], bias 0.5: every output is
        // x[i][j] - x[i+1][j+1] + 0.5 = -3.5 without padding; with padding 1 and stride 2 the four windows start at
        // (-1,-1), (-1,1), (1,-1), (1,1) and give 0 - 1, 0 - 3, 0 - 7, 5 - 9, plus 0.5.
        Tensor x = Tensor.of(new float[] {1, 2, 3, 4, 5, 6, 7, 8, 9}, 1, 1, 3, 3);
        Tensor w = Tensor.of(new float[] {1, 0, 0, -1}, 1, 1, 2, 2);
        Tensor b = Tensor.of(new float[] {0.5f}, 1);
        Tensor y = new Conv2d("c", w, b).forward(x);
        assertArrayEquals(new int[] {1, 1, 2, 2}, y.shape());
        assertArrayEquals(new float[] {-3.5f, -3.5f, -3.5f, -3.5f}, y.toFloatArray());
        Tensor z = new Conv2d("c", w, b, 2, 1).forward(x);
        assertArrayEquals(new int[] {1, 1, 2, 2}, z.shape());
        assertArrayEquals(new float[] {-0.5f, -2.5f, -6.5f, -3.5f}, z.toFloatArray());
    }

    @Test
    void convolutionMatchesADirectConvolution() {
        // Source: the definition of 2-D cross-correlation, evaluated directly in double (Reference.conv).
        int[][] cases = {{2, 3, 9, 7, 4, 3, 3, 1, 1}, {3, 2, 8, 8, 5, 3, 2, 2, 0}, {1, 4, 6, 5, 2, 1, 1, 1, 0},
            {2, 1, 7, 9, 3, 5, 3, 3, 2}};
        for (int[] k : cases) {
            Tensor x = random(k[0] * 31 + k[1], k[0], k[1], k[2], k[3]);
            Tensor w = random(k[4] * 7 + k[5], k[4], k[1], k[5], k[6]);
            Tensor b = random(k[4], k[4]);
            Tensor y = new Conv2d("c", w, b, k[7], k[8]).forward(x);
            double[] ref = Reference.conv(Reference.toDouble(x.toFloatArray()), x.shape(),
                    Reference.toDouble(w.toFloatArray()), w.shape(), Reference.toDouble(b.toFloatArray()), k[7],
                    k[8]).v();
            float[] got = y.toFloatArray();
            assertEquals(ref.length, got.length);
            for (int i = 0; i < ref.length; i++) {
                assertEquals(ref[i], got[i], 1e-5 * (1 + Math.abs(ref[i])), java.util.Arrays.toString(k) + " " + i);
            }
        }
    }

    @Test
    void convolutionMatchesNumpy() throws IOException {
        String py = Fixtures.pythonWithNumpy();
        assumeTrue(py != null, "python3 with numpy not found");
        // Source: NumPy, a convolution built from shifted slices of the zero-padded input and einsum.
        Tensor x = random(1, 3, 4, 11, 10);
        Tensor w = random(2, 6, 4, 3, 5);
        Tensor b = random(3, 6);
        Path dir = Fixtures.tempDir("conv");
        Map<String, Tensor> m = new LinkedHashMap<>();
        m.put("x", x);
        m.put("w", w);
        m.put("b", b);
        Checkpoint.write(dir.resolve("in.safetensors"), m);
        Fixtures.runPython(py, String.join("\n",
                "import sys, json, struct",
                "import numpy as np",
                "raw = open(sys.argv[1] + '/in.safetensors', 'rb').read()",
                "n = struct.unpack('<Q', raw[:8])[0]; head = json.loads(raw[8:8 + n]); data = raw[8 + n:]",
                "def get(k):",
                "    e = head[k]; s, t = e['data_offsets']",
                "    return np.frombuffer(data[s:t], '<f4').reshape(e['shape']).astype(np.float64)",
                "x, w, b = get('x'), get('w'), get('b')",
                "stride, pad = 2, 1",
                "xp = np.pad(x, ((0, 0), (0, 0), (pad, pad), (pad, pad)))",
                "kh, kw = w.shape[2], w.shape[3]",
                "oh = (x.shape[2] + 2 * pad - kh) // stride + 1; ow = (x.shape[3] + 2 * pad - kw) // stride + 1",
                "y = np.zeros((x.shape[0], w.shape[0], oh, ow)) + b[None, :, None, None]",
                "for u in range(kh):",
                "    for v in range(kw):",
                "        patch = xp[:, :, u:u + stride * oh:stride, v:v + stride * ow:stride]",
                "        y += np.einsum('nchw,oc->nohw', patch, w[:, :, u, v])",
                "np.save(sys.argv[1] + '/y.npy', y.astype(np.float32))"), dir.toString());
        Tensor ref;
        try (Checkpoint c = Checkpoint.open(dir.resolve("y.npy"))) {
            ref = c.tensors().values().iterator().next();
            ref = Tensor.of(ref.toFloatArray(), ref.shape());
        }
        Tensor y = new Conv2d("c", w, b, 2, 1).forward(x);
        assertArrayEquals(ref.shape(), y.shape());
        for (int i = 0; i < ref.size(); i++) {
            assertEquals(ref.getFlat(i), y.getFlat(i), 1e-5 * (1 + Math.abs(ref.getFlat(i))), "output " + i);
        }
    }

    @Test
    void batchNormAppliesTheInferenceFormula() {
        // Source: the definition y = gamma (x - mean) / sqrt(var + eps) + beta, evaluated per element in double.
        int c = 3;
        BatchNorm bn = new BatchNorm("bn", Tensor.of(new float[] {1.5f, -0.5f, 2f}, c),
                Tensor.of(new float[] {0.1f, 0.2f, -0.3f}, c), Tensor.of(new float[] {0.5f, -1f, 2f}, c),
                Tensor.of(new float[] {4f, 0.25f, 1f}, c), 1e-3);
        Tensor x4 = random(5, 2, c, 4, 3);
        Tensor x2 = random(6, 7, c);
        for (Tensor x : new Tensor[] {x4, x2}) {
            Tensor y = bn.forward(x);
            int p = x.rank() == 4 ? 12 : 1;
            for (int i = 0; i < x.size(); i++) {
                int ch = (i / p) % c;
                double want = bn.gamma().getFlat(ch) * (x.getFlat(i) - bn.mean().getFlat(ch))
                        / Math.sqrt(bn.variance().getFlat(ch) + 1e-3) + bn.beta().getFlat(ch);
                assertEquals(want, y.getFlat(i), 1e-5 * (1 + Math.abs(want)));
            }
        }
        assertThrows(IllegalArgumentException.class, () -> bn.forward(random(1, 2, 4)));
    }

    @Test
    void poolingFlattenAndRelu6ReproduceWorkedExamples() {
        // Source: worked by hand on a 4x4 image of 1..16 (rows 1-4, 5-8, 9-12, 13-16).
        float[] v = new float[16];
        for (int i = 0; i < 16; i++) {
            v[i] = i + 1;
        }
        Tensor x = Tensor.of(v, 1, 1, 4, 4);
        assertArrayEquals(new float[] {6, 8, 14, 16}, Pool2d.max("p", 2, 2).forward(x).toFloatArray());
        assertArrayEquals(new float[] {3.5f, 5.5f, 11.5f, 13.5f}, Pool2d.average("p", 2, 2).forward(x).toFloatArray());
        assertArrayEquals(new float[] {11, 12, 15, 16}, Pool2d.max("p", 3, 1).forward(x).toFloatArray());
        // Worked by hand: a window's first element, then each larger one, so a NaN counts only when it comes first;
        // the training pass (which also records the winners) gives the same values.
        Tensor odd = Tensor.of(new float[] {Float.NaN, 1, 1, Float.NaN, 2, 3, 2, 0, -0.0f, -1, 5, 5, -2, -0.0f, 5, 4},
                1, 1, 4, 4);
        float[] pooled = Pool2d.max("p", 2, 2).forward(odd).toFloatArray();
        assertArrayEquals(new float[] {Float.NaN, 2, -0.0f, 5}, pooled);
        assertArrayEquals(pooled, Pool2d.max("p", 2, 2).node().forward(new Node.Act(odd.toFloatArray(),
                odd.shape()), false).v());
        Tensor f = new Flatten("f").forward(random(3, 2, 3, 2, 2));
        assertArrayEquals(new int[] {2, 12}, f.shape());
        assertArrayEquals(new float[] {0, 0, 3, 6, 6}, new Relu6("r").forward(Tensor.of(new float[] {-2, 0, 3, 6,
            7.5f}, 1, 5)).toFloatArray());
    }

    /** A small conv net with batch norms whose statistics are far from the identity. */
    static Network convNet(long seed) {
        Random r = new Random(seed);
        Map<String, Tensor> t = new LinkedHashMap<>();
        t.put("conv1.weight", random(seed + 1, 4, 2, 3, 3));
        t.put("conv1.bias", random(seed + 2, 4));
        t.put("conv2.weight", random(seed + 3, 5, 4, 3, 3));
        t.put("fc.weight", random(seed + 4, 3, 5 * 2 * 2));
        t.put("fc.bias", random(seed + 5, 3));
        for (String bn : new String[] {"bn1", "bn2"}) {
            int c = bn.equals("bn1") ? 4 : 5;
            float[] g = new float[c];
            float[] be = new float[c];
            float[] mu = new float[c];
            float[] var = new float[c];
            for (int i = 0; i < c; i++) {
                g[i] = (float) (0.5 + r.nextDouble() * 2) * (r.nextBoolean() ? 1 : -1);
                be[i] = (float) r.nextGaussian();
                mu[i] = (float) r.nextGaussian();
                var[i] = (float) Math.exp(2 * r.nextGaussian());
            }
            t.put(bn + ".weight", Tensor.of(g, c));
            t.put(bn + ".bias", Tensor.of(be, c));
            t.put(bn + ".running_mean", Tensor.of(mu, c));
            t.put(bn + ".running_var", Tensor.of(var, c));
        }
        return Network.from(t).conv2d("conv1", 1, 1).batchNorm("bn1").relu().maxPool(2, 2)
                .conv2d("conv2", 2, 1).batchNorm("bn2").relu6().flatten().linear("fc").build();
    }

    @Test
    void buildsAConvNetFromNamedTensors() {
        Network net = convNet(40);
        assertEquals(java.util.List.of("conv1", "bn1", "relu1", "pool1", "conv2", "bn2", "relu6_1", "flatten1",
                "fc"), net.layers().stream().map(Layer::name).toList());
        Tensor y = net.forward(random(41, 3, 2, 8, 8));
        assertArrayEquals(new int[] {3, 3}, y.shape());
        // conv2 has no bias tensor: zeros
        assertEquals(0f, ((Conv2d) net.layers().get(4)).bias().getFlat(2));
        // every tensor comes back by its checkpoint name, so the network round-trips through parameters()
        Map<String, Tensor> p = net.parameters();
        assertEquals(14, p.size());
        Network again = Network.from(p).conv2d("conv1", 1, 1).batchNorm("bn1").relu().maxPool(2, 2)
                .conv2d("conv2", 2, 1).batchNorm("bn2").relu6().flatten().linear("fc").build();
        assertEquals(y, again.forward(random(41, 3, 2, 8, 8)));
    }

    @Test
    void builderNamesMissingTensorsAndBrokenChains() {
        Map<String, Tensor> p = convNet(40).parameters();
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                () -> Network.from(p).conv2d("conv1", 1, 1).batchNorm("bn3"));
        assertTrue(e.getMessage().contains("bn3.weight"), e.getMessage());
        e = assertThrows(IllegalArgumentException.class, () -> Network.from(p).conv2d("conv1", 1, 1)
                .batchNorm("bn2"));
        assertTrue(e.getMessage().contains("conv1 gives 4 channels but bn2 takes 5"), e.getMessage());
        e = assertThrows(IllegalArgumentException.class, () -> Network.from(p).conv2d("conv1", 1, 1).build()
                .forward(random(1, 1, 3, 8, 8)));
        assertTrue(e.getMessage().contains("conv1") && e.getMessage().contains("[1, 3, 8, 8]"), e.getMessage());
    }

    @Test
    void foldingBatchNormKeepsOutputs() {
        // Source: algebra of the inference form; BN(W x + b) = (gamma/sigma) W x + (gamma/sigma)(b - mean) + beta.
        Network net = convNet(50);
        Network folded = net.foldBatchNorm();
        assertEquals(7, folded.layers().size());
        assertTrue(folded.layers().stream().noneMatch(l -> l instanceof BatchNorm));
        Tensor x = random(51, 16, 2, 8, 8);
        assertRelativelyClose(net.forward(x), folded.forward(x), 1e-5);
        // after a linear layer: [N, C] statistics
        Map<String, Tensor> t = new LinkedHashMap<>(net.parameters());
        t.put("fc1.weight", random(52, 5, 6));
        t.put("fc1.bias", random(53, 5));
        t.put("fc2.weight", random(54, 2, 5));
        t.put("bn.weight", convNet(55).parameters().get("bn2.weight"));
        t.put("bn.bias", convNet(55).parameters().get("bn2.bias"));
        t.put("bn.running_mean", convNet(55).parameters().get("bn2.running_mean"));
        t.put("bn.running_var", convNet(55).parameters().get("bn2.running_var"));
        Network mlp = Network.from(t).linear("fc1").batchNorm("bn").relu().linear("fc2").build();
        Tensor z = random(56, 40, 6);
        assertRelativelyClose(mlp.forward(z), mlp.foldBatchNorm().forward(z), 1e-5);
    }

    /** Every element within {@code rel} of the largest magnitude of the reference. */
    static void assertRelativelyClose(Tensor want, Tensor got, double rel) {
        assertArrayEquals(want.shape(), got.shape());
        double scale = 0;
        for (int i = 0; i < want.size(); i++) {
            scale = Math.max(scale, Math.abs(want.getFlat(i)));
        }
        for (int i = 0; i < want.size(); i++) {
            assertEquals(want.getFlat(i), got.getFlat(i), rel * scale, "element " + i);
        }
    }
}
