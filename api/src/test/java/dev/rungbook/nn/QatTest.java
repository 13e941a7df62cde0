package dev.rungbook.nn;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.io.Checkpoint;
import dev.rungbook.progress.OperationInterruptedException;
import dev.rungbook.quant.Quantizer;
import dev.rungbook.tensor.Tensor;
import dev.rungbook.testing.Fixtures;
import java.nio.file.Path;
import java.util.ArrayList;
import java.util.LinkedHashMap;
import java.util.List;
import java.util.Map;
import java.util.TreeSet;
import java.util.concurrent.atomic.AtomicLong;
import java.util.function.Function;
import org.junit.jupiter.api.Test;

class QatTest {
    private static final double H = 1e-5;
    private static final Path SAMPLES = Path.of("..", "sample-tensors");

    /** The sample conveyor classifier, read eagerly. */
    static Network sampleMlp() {
        Map<String, Tensor> m = new LinkedHashMap<>();
        try (Checkpoint c = Checkpoint.open(SAMPLES.resolve("conveyor-mlp.f32.safetensors"))) {
            c.tensors().forEach((k, v) -> m.put(k, Tensor.of(v.toFloatArray(), v.shape()).withName(k)));
        }
        return Network.mlp(m, "fc1", "fc2", "fc3");
    }

    private static Network ptq(Network net, Quantizer q) {
        return net.mapWeighted(l -> l.withWeight(q.apply(l.weight()).dequantized()));
    }

    /** Mean cross-entropy of the MLP linear-relu-...-linear with weights {@code w}, biases {@code b}, in double. */
    private static double mlpLoss(double[][] w, double[][] b, double[] x, int[] s, int[] labels) {
        Reference.Out a = new Reference.Out(x, s);
        for (int l = 0; l < w.length; l++) {
            a = Reference.linear(a.v(), a.shape(), new double[][] {w[l], b[l]});
            if (l + 1 < w.length) {
                a = Reference.clip(a.v(), a.shape(), 0, Double.POSITIVE_INFINITY);
            }
        }
        return Reference.crossEntropy(a.v(), a.shape()[1], labels);
    }

    /** Nodes of {@code net} with the given transforms, and the gradients of one batch. */
    private static List<Node> gradients(Network net, Function<WeightedLayer, WeightTransform> t, Tensor x,
            int[] labels) {
        List<Node> nodes = new ArrayList<>();
        for (Layer l : net.layers()) {
            nodes.add(Node.of(l, t));
        }
        List<Node.Param> params = new ArrayList<>();
        nodes.forEach(n -> params.addAll(n.params()));
        Trainer.lossAndGradients(nodes, params, new Node.Act(x.toFloatArray(), x.shape()), labels);
        return nodes;
    }

    /**
     * Central differences of the loss with respect to each effective (quantized) weight element: what the
     * straight-through estimator passes to the full-precision weight.
     */
    private static double[][] effectiveGradients(double[][] w, double[][] b, Tensor x, int[] labels) {
        double[] xd = Reference.toDouble(x.toFloatArray());
        double[][] g = new double[w.length][];
        for (int l = 0; l < w.length; l++) {
            g[l] = new double[w[l].length];
            for (int i = 0; i < w[l].length; i++) {
                double keep = w[l][i];
                w[l][i] = keep + H;
                double up = mlpLoss(w, b, xd, x.shape(), labels);
                w[l][i] = keep - H;
                double down = mlpLoss(w, b, xd, x.shape(), labels);
                w[l][i] = keep;
                g[l][i] = (up - down) / (2 * H);
            }
        }
        return g;
    }

    private static final int[] LABELS = {0, 1, 2, 1, 0, 2, 2};

    @Test
    void straightThroughEstimatorPassesTheQuantizedWeightsGradient() {
        // Source: the straight-through estimator's definition (Bengio et al. 2013): dL/dw := dL/dq(w), checked
        // against central differences of the loss in the quantized weights (double-precision reference).
        Network net = Trainer.initialMlp(3, 6, 8, 5, 3);
        Tensor x = LayersTest.random(4, 7, 6);
        Quantizer q = Quantizer.linear(3).perTensor();
        List<Node> nodes = gradients(net, l -> new FakeQuantization(q, l.name() + ".weight", l.weight().shape()), x,
                LABELS);
        List<WeightedNode> wn = new ArrayList<>();
        nodes.forEach(n -> {
            if (n instanceof WeightedNode) {
                wn.add((WeightedNode) n);
            }
        });
        double[][] w = new double[3][];
        double[][] b = new double[3][];
        for (int l = 0; l < 3; l++) {
            Linear lin = (Linear) net.linearLayers().get(l);
            w[l] = Reference.toDouble(q.apply(lin.weight()).dequantized().toFloatArray());
            b[l] = Reference.toDouble(lin.bias().toFloatArray());
        }
        double[][] ge = effectiveGradients(w, b, x, LABELS);
        for (int l = 0; l < 3; l++) {
            for (int i = 0; i < ge[l].length; i++) {
                assertEquals(ge[l][i], wn.get(l).weight.grad[i], 1e-4 * (1 + Math.abs(ge[l][i])), "layer " + l);
            }
        }
        // the forward pass used quantized weights: layer() gives them, latentLayer() the float ones
        assertEquals(q.apply(net.linearLayers().get(0).weight()).dequantized().withName("fc1.weight"),
                ((Linear) wn.get(0).layer()).weight());
        assertEquals(net.linearLayers().get(0).weight().withName("fc1.weight"),
                wn.get(0).latentLayer().weight());
    }

    @Test
    void trainedTernaryGradientsMatchFiniteDifferences() {
        // Source: Zhu et al. 2017, "Trained Ternary Quantization", ICLR: w_t = Wp above t max|w|, -Wn below
        // -t max|w|, 0 between. Wp and Wn enter the forward pass linearly, so their gradients are true derivatives
        // and central differences check them exactly; the latent gradient is the published rule (Wp, 1 or Wn times
        // the effective weight's gradient), checked against central differences in the effective weights.
        // random biases: with ternary weights and zero biases, pre-activations can be exactly 0, where ReLU has a kink
        // and central differences see half the slope
        Network net = Trainer.initialMlp(5, 6, 8, 5, 3).mapLinear(l -> l.withBias(LayersTest.random(
                l.outFeatures(), l.outFeatures())));
        Tensor x = LayersTest.random(6, 7, 6);
        double t = 0.3;
        List<TrainedTernary> tt = new ArrayList<>();
        List<Node> nodes = gradients(net, l -> {
            TrainedTernary r = new TrainedTernary(t, l.name());
            tt.add(r);
            return r;
        }, x, LABELS);
        List<WeightedNode> wn = new ArrayList<>();
        nodes.forEach(n -> {
            if (n instanceof WeightedNode) {
                wn.add((WeightedNode) n);
            }
        });
        double[][] latent = new double[3][];
        double[][] b = new double[3][];
        double[] wp = new double[3];
        double[] wneg = new double[3];
        for (int l = 0; l < 3; l++) {
            latent[l] = Reference.toDouble(wn.get(l).weight.value);
            b[l] = Reference.toDouble(wn.get(l).bias.value);
            wp[l] = tt.get(l).positive.value[0];
            wneg[l] = tt.get(l).negative.value[0];
            double max = 0;
            for (double v : latent[l]) {
                max = Math.max(max, Math.abs(v));
            }
            assertEquals(1.0, max, 1e-6, "latent weights normalized to max |w| = 1");
        }
        double[] xd = Reference.toDouble(x.toFloatArray());
        int inside = 0;
        for (int l = 0; l < 3; l++) {
            for (int sign = 0; sign < 2; sign++) {
                double[] scale = sign == 0 ? wp : wneg;
                double keep = scale[l];
                scale[l] = keep + H;
                double up = mlpLoss(ternary(latent, wp, wneg, t), b, xd, x.shape(), LABELS);
                scale[l] = keep - H;
                double down = mlpLoss(ternary(latent, wp, wneg, t), b, xd, x.shape(), LABELS);
                scale[l] = keep;
                double numeric = (up - down) / (2 * H);
                float got = (sign == 0 ? tt.get(l).positive : tt.get(l).negative).grad[0];
                assertEquals(numeric, got, 1e-4 * (1 + Math.abs(numeric)), "layer " + l + " scale " + sign);
                assertTrue(Math.abs(numeric) > 1e-4, "a scale gradient that can fail: " + numeric);
            }
        }
        double[][] effective = ternary(latent, wp, wneg, t);
        double[][] ge = effectiveGradients(effective, b, x, LABELS);
        for (int l = 0; l < 3; l++) {
            for (int i = 0; i < ge[l].length; i++) {
                double factor = effective[l][i] > 0 ? wp[l] : effective[l][i] < 0 ? wneg[l] : 1;
                inside += factor == 1 ? 1 : 0;
                double want = factor * ge[l][i];
                assertEquals(want, wn.get(l).weight.grad[i], 1e-4 * (1 + Math.abs(want)), "layer " + l + " " + i);
            }
        }
        assertTrue(inside > 10, inside + " weights in the zero region");
    }

    /** The ternary weights by the published rule, computed here in double. */
    private static double[][] ternary(double[][] latent, double[] wp, double[] wn, double t) {
        double[][] out = new double[latent.length][];
        for (int l = 0; l < latent.length; l++) {
            double max = 0;
            for (double v : latent[l]) {
                max = Math.max(max, Math.abs(v));
            }
            double delta = (float) (t * (float) max);
            out[l] = new double[latent[l].length];
            for (int i = 0; i < latent[l].length; i++) {
                double v = latent[l][i];
                out[l][i] = v > delta ? wp[l] : v < -delta ? -wn[l] : 0;
            }
        }
        return out;
    }

    @Test
    void fineTuningRecoversFourBitPerTensorAccuracy() {
        // Measured on the sample conveyor classifier (float test accuracy 0.966). Its fc1 channel ranges differ by
        // three orders of magnitude, so int4 per-tensor PTQ of the raw network is near chance (0.19); cross-layer
        // equalization first is the best post-training start (0.716). Three epochs of quantization-aware
        // fine-tuning on the 2000 validation samples gave 0.970 on the 2000 held-out test samples. The margin
        // asserted, 0.15, is more than ten binomial standard errors (about 0.01 at n = 2000).
        Network net = Equalization.apply(sampleMlp()).network();
        Dataset val = Dataset.load(SAMPLES.resolve("conveyor-validation.npz"));
        Dataset test = Dataset.load(SAMPLES.resolve("conveyor-test.npz"));
        Quantizer q = Quantizer.linear(4).perTensor();
        double ptq = ptq(net, q).accuracy(test);
        Trainer.Run run = Trainer.adam(3e-4).epochs(3).seed(1).quantizeWeights(q).run(net, val);
        double qat = run.network().accuracy(test);
        assertTrue(qat >= ptq + 0.15, "QAT " + qat + " vs PTQ " + ptq);
        assertTrue(qat >= net.accuracy(test) - 0.02, "QAT " + qat + " vs float " + net.accuracy(test));
        // the returned network is what the quantizer makes of the kept full-precision weights
        assertEquals(ptq(run.fullPrecision(), q).parameters(), run.network().parameters());
        double[] losses = run.epochLosses();
        assertTrue(losses[2] < losses[0], java.util.Arrays.toString(losses));
    }

    @Test
    void trainedTernaryRecoversTernaryAccuracy() {
        // Measured: ternary (TWN threshold 0.7 mean|w|, one scale per tensor) PTQ of the equalized sample network
        // gives 0.54 test accuracy; three epochs of trained ternary quantization (t = 0.05) give 0.95.
        Network net = Equalization.apply(sampleMlp()).network();
        Dataset val = Dataset.load(SAMPLES.resolve("conveyor-validation.npz"));
        Dataset test = Dataset.load(SAMPLES.resolve("conveyor-test.npz"));
        double ptq = ptq(net, Quantizer.ternary()).accuracy(test);
        Network ttq = Trainer.adam(1e-3).epochs(3).seed(1).trainedTernary(0.05).train(net, val);
        double acc = ttq.accuracy(test);
        assertTrue(acc >= ptq + 0.3, "TTQ " + acc + " vs PTQ " + ptq);
        for (WeightedLayer l : ttq.weightedLayers()) {
            TreeSet<Float> levels = new TreeSet<>();
            for (float v : l.weight().toFloatArray()) {
                levels.add(v);
            }
            assertEquals(3, levels.size(), l.name() + " levels " + levels);
            assertTrue(levels.first() < 0 && levels.last() > 0 && levels.contains(0f), l.name() + " " + levels);
        }
    }

    @Test
    void learnedStepSizeFollowsThePaperOnAWorkedExample() {
        // Source: Esser et al. 2020, "Learned Step Size Quantization", ICLR, eqs. 1-3 and the gradient scale
        // g = 1 / sqrt(N Qp); worked by hand for 3 bits (Qn = 4, Qp = 3). Initial step 2 mean|w| / sqrt(Qp) =
        // 2 * 0.8025 / sqrt(3) = 0.926647. With step 0.2: w / s = 1.3, -4.5, 10, 0.25 give codes 1, -4 (clipped),
        // 3 (clipped), 0 and values 0.2, -0.8, 0.6, 0. For dL/dw_hat = 1 everywhere the step's gradient is
        // ((1 - 1.3) - 4 + 3 + (0 - 0.25)) / sqrt(4 * 3) = -1.55 / sqrt(12) = -0.447446 and the weights' 1, 0, 0, 1.
        LearnedStepSize lsq = new LearnedStepSize(3, false, "fc", 1);
        float[] w = {0.26f, -0.9f, 2.0f, 0.05f};
        lsq.prepare(w);
        assertEquals(0.926647, lsq.step.value[0], 1e-6);
        lsq.step.value[0] = 0.2f;
        float[] q = lsq.forward(w);
        float[] want = {0.2f, -0.8f, 0.6f, 0f};
        for (int i = 0; i < 4; i++) {
            assertEquals(want[i], q[i], 1e-6, "value " + i);
        }
        float[] g = new float[4];
        lsq.backward(w, new float[] {1, 1, 1, 1}, g);
        assertEquals(-1.55 / Math.sqrt(12), lsq.step.grad[0], 1e-5);
        assertEquals("[1.0, 0.0, 0.0, 1.0]", java.util.Arrays.toString(g));
    }

    @Test
    void learnedScalesRecoverFourBitPerTensorWithoutEqualization() {
        // Measured on the raw sample network (no equalization): int4 per-tensor PTQ gives 0.19 test accuracy, and
        // fine-tuning with the fixed min-max scale (straight-through estimator) stays there (0.20 after three
        // epochs: the small channels of fc1 sit below half a step and no weight update moves them across). Learning
        // the step instead (LSQ, three epochs, learning rate 3e-4) gave 0.956.
        Network net = sampleMlp();
        Dataset val = Dataset.load(SAMPLES.resolve("conveyor-validation.npz"));
        Dataset test = Dataset.load(SAMPLES.resolve("conveyor-test.npz"));
        double ptq = ptq(net, Quantizer.linear(4).perTensor()).accuracy(test);
        Network lsq = Trainer.adam(3e-4).epochs(3).seed(1).learnedStepSize(4, false).train(net, val);
        double acc = lsq.accuracy(test);
        assertTrue(acc >= ptq + 0.5, "LSQ " + acc + " vs PTQ " + ptq);
        for (WeightedLayer l : lsq.weightedLayers()) {
            assertTrue(new TreeSet<>(floats(l.weight())).size() <= 16, l.name() + " holds at most 16 levels");
        }
    }

    @Test
    void learnedScalesRecoverPerChannelInt4OnTheSampleConvNet() {
        // Measured on the sample thermal conv net with its batch norms folded (float test accuracy 0.9495): int4
        // per-channel PTQ of all three layers gives 0.36 (conv1, which sees every tile's large common temperature
        // offset, is the sensitive layer); four epochs of learned-step-size fine-tuning on the 2000 validation tiles
        // gave 0.829 on the 2000 test tiles.
        Map<String, Tensor> t = new LinkedHashMap<>();
        try (Checkpoint c = Checkpoint.open(SAMPLES.resolve("thermal-cnn.f32.safetensors"))) {
            c.tensors().forEach((k, v) -> t.put(k, Tensor.of(v.toFloatArray(), v.shape()).withName(k)));
        }
        Network net = Network.from(t).conv2d("conv1", 1, 1).batchNorm("bn1").relu().maxPool(2, 2)
                .conv2d("conv2", 1, 1).batchNorm("bn2").relu().maxPool(2, 2).flatten().linear("fc").build()
                .foldBatchNorm();
        Dataset val = Dataset.load(SAMPLES.resolve("thermal-validation.npz"));
        Dataset test = Dataset.load(SAMPLES.resolve("thermal-test.npz"));
        double ptq = ptq(net, Quantizer.linear(4)).accuracy(test);
        double qat = Trainer.adam(1e-3).epochs(4).seed(1).learnedStepSize(4, true).train(net, val).accuracy(test);
        assertTrue(qat >= ptq + 0.3, "LSQ " + qat + " vs PTQ " + ptq);
    }

    @Test
    void keepFloatLeavesNamedLayersAlone() {
        Network net = Trainer.initialMlp(7, 4, 6, 3);
        Dataset d = new Dataset(LayersTest.random(8, 40, 4), new int[40]);
        Network out = Trainer.sgd(1e-2).momentum(0.5).epochs(1).quantizeWeights(Quantizer.linear(2).perTensor())
                .keepFloat("fc2").train(net, d);
        assertTrue(new TreeSet<>(floats(out.weightedLayers().get(0).weight())).size() <= 4, "fc1 is 2-bit");
        assertTrue(new TreeSet<>(floats(out.weightedLayers().get(1).weight())).size() > 4, "fc2 stays float");
        assertThrows(IllegalArgumentException.class, () -> Trainer.adam(1e-3).keepFloat("fc9").train(net, d));
    }

    private static List<Float> floats(Tensor t) {
        List<Float> out = new ArrayList<>();
        for (float v : t.toFloatArray()) {
            out.add(v);
        }
        return out;
    }

    @Test
    void reportsProgressAndStopsWhenInterrupted() {
        Network net = Trainer.initialMlp(9, 4, 6, 3);
        Dataset d = new Dataset(Tensor.of(Fixtures.gaussian(10, 400), 100, 4), new int[100]);
        AtomicLong last = new AtomicLong();
        AtomicLong total = new AtomicLong();
        Trainer.adam(1e-3).epochs(2).batchSize(10).trainedTernary(0.05)
                .progress((task, done, all, loss) -> {
                    last.set(done);
                    total.set(all);
                    assertTrue(task.startsWith("quantization-aware training"), task);
                }).train(net, d);
        assertEquals(20, last.get());
        assertEquals(20, total.get());
        Thread.currentThread().interrupt();
        try {
            assertThrows(OperationInterruptedException.class, () -> Trainer.adam(1e-3)
                    .quantizeWeights(Quantizer.linear(4)).train(net, d));
        } finally {
            Thread.interrupted();
        }
    }
}
