package dev.rungbook.nn;

import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;

import dev.rungbook.internal.ForwardKernels;
import dev.rungbook.internal.TensorAccess;
import dev.rungbook.tensor.Tensor;
import dev.rungbook.testing.Fixtures;
import java.util.SplittableRandom;
import org.junit.jupiter.api.Test;

/**
 * The forward passes on packed weights ({@code internal.ForwardKernels}) give what the loops they replaced gave:
 * {@link Linear#forward} the bits of {@link Dense#affine} (same summation order), {@link IntegerNetwork} the codes of
 * its previous per-output dot products, on odd shapes and on the sample network.
 */
class PackedForwardTest {
    private static final int[] SIZES = {1, 3, 17, 33, 513};

    @Test
    void linearForwardHasTheBitsOfTheDenseKernel() {
        // Source: Dense.affine, the previous kernel (bias first, then one fused multiply-add per input in order).
        for (int n : SIZES) {
            for (int in : SIZES) {
                for (int out : new int[] {1, 3, 17, 33, 70}) {
                    float[] x = Fixtures.gaussian(n * 7L + in, n * in);
                    float[] w = Fixtures.gaussian(out * 13L + in, out * in);
                    float[] b = Fixtures.gaussian(out, out);
                    float[] want = new float[n * out];
                    Dense.affine(x, w, b, want, n, in, out);
                    Linear l = new Linear("l", Tensor.of(w, out, in), Tensor.of(b, out));
                    float[] got = TensorAccess.data(l.forward(Tensor.of(x, n, in)));
                    assertArrayEquals(want, got, n + " x " + in + " -> " + out);
                }
            }
        }
    }

    @Test
    void sampleNetworkForwardHasTheBitsOfTheDenseKernelChain() {
        // Source: the sample classifier run layer by layer through Dense.affine and ReLU.
        Network net = QatTest.sampleMlp();
        Tensor x = EqualizationTest.inputs(31, 513, 72);
        float[] a = TensorAccess.data(x);
        int n = 513;
        for (Layer layer : net.layers()) {
            if (layer instanceof Linear) {
                Linear l = (Linear) layer;
                float[] y = new float[n * l.outFeatures()];
                Dense.affine(a, TensorAccess.data(l.weight()), TensorAccess.data(l.bias()), y, n, l.inFeatures(),
                        l.outFeatures());
                a = y;
            } else {
                float[] r = new float[a.length];
                for (int i = 0; i < a.length; i++) {
                    r[i] = Math.max(0f, a[i]);
                }
                a = r;
            }
        }
        assertArrayEquals(a, TensorAccess.data(net.forward(x)));
    }

    @Test
    void integerLayersGiveTheCodesOfThePreviousLoop() {
        // Source: IntegerNetwork.layerCodesPlain, the per-output int32 dot products the packed kernel replaced;
        // integer results must be identical, in both requantization modes and for the real-multiplier simulation.
        Network net = QatTest.sampleMlp();
        SimulatedNetwork sim = NetworkQuantization.of(net).calibrate(EqualizationTest.inputs(32, 512, 72));
        for (int n : new int[] {1, 3, 17, 513}) {
            Tensor x = EqualizationTest.inputs(33 + n, n, 72);
            for (IntegerNetwork.Requantization mode : IntegerNetwork.Requantization.values()) {
                IntegerNetwork in = IntegerNetwork.of(sim).requantization(mode);
                for (boolean fixedPoint : new boolean[] {true, false}) {
                    int[] a = in.quantizeInput(x);
                    int[] b = a;
                    int zx = in.inputZeroPoint();
                    for (int i = 0; i < in.depth(); i++) {
                        a = in.layerCodes(i, a, zx, n, fixedPoint);
                        b = in.layerCodesPlain(i, b, zx, n, fixedPoint);
                        assertArrayEquals(b, a, "layer " + i + ", n " + n + ", " + mode + ", fixed " + fixedPoint);
                        zx = in.outputZeroPoint(i);
                    }
                }
            }
        }
        Network small = Trainer.initialMlp(11, 17, 33, 3);
        IntegerNetwork in = IntegerNetwork.of(small, EqualizationTest.inputs(12, 64, 17), 5);
        Tensor x = EqualizationTest.inputs(13, 33, 17);
        int[] a = in.quantizeInput(x);
        int[] b = a;
        int zx = in.inputZeroPoint();
        for (int i = 0; i < in.depth(); i++) {
            a = in.layerCodes(i, a, zx, 33, true);
            b = in.layerCodesPlain(i, b, zx, 33, true);
            assertArrayEquals(b, a, "5-bit network, layer " + i);
            zx = in.outputZeroPoint(i);
        }
    }

    @Test
    void inputQuantizationIsTheClampedRoundedQuotient() {
        // Source: the definition clamp(rint(v / S_x) + z_x, 0, 2^b - 1) with Math.min/Math.max in double, as the
        // previous loop computed it; NaN gives 0 there ((int) NaN), and so must it in the kernel (quantizeInput
        // refuses NaN and infinities before the kernel: IntegerNetworkTest).
        Network net = Trainer.initialMlp(11, 17, 9, 3);
        IntegerNetwork in = IntegerNetwork.of(net, EqualizationTest.inputs(12, 64, 17), 8);
        float[] v = Fixtures.gaussian(5, 17 * 40);
        for (int i = 0; i < v.length; i += 7) {
            v[i] *= 1e3f; // far outside the range on both sides
        }
        v[3] = Float.NaN;
        v[4] = -0.0f;
        v[5] = Float.POSITIVE_INFINITY;
        v[6] = Float.NEGATIVE_INFINITY;
        int[] q = ForwardKernels.quantizeCodes(v, in.inputScale(), in.inputZeroPoint(), 255);
        for (int i = 0; i < v.length; i++) {
            int want = (int) Math.max(0, Math.min(255, Math.rint(v[i] / in.inputScale()) + in.inputZeroPoint()));
            assertEquals(want, q[i], "value " + v[i]);
        }
    }

    @Test
    void convolutionHasTheBitsOfTheDotProductKernel() {
        // Source: the previous forward pass, rebuilt here: receptive fields as rows (im2colRows), each sample's
        // [out, P] block by Dense.matmulTransposedB (four partial sums), then the bias added.
        SplittableRandom r = new SplittableRandom(43);
        int[][] cases = { // in, out, kernel, stride, padding, h, w, n
            {1, 8, 3, 1, 1, 16, 16, 3}, {8, 16, 3, 1, 1, 8, 8, 2}, {3, 5, 3, 2, 1, 9, 7, 3}, {2, 3, 1, 1, 0, 5, 3, 1},
            {3, 17, 2, 3, 2, 11, 13, 2}, {4, 1, 3, 1, 0, 3, 3, 5}, {5, 33, 3, 1, 2, 1, 17, 1}};
        for (int[] c : cases) {
            int in = c[0];
            int out = c[1];
            int kk = c[2];
            Conv2d conv = new Conv2d("conv", Tensor.of(Fixtures.gaussian(r.nextLong(), out * in * kk * kk), out, in, kk,
                    kk), Tensor.of(Fixtures.gaussian(r.nextLong(), out), out), c[3], c[4]);
            int n = c[7];
            Tensor x = Tensor.of(Fixtures.gaussian(r.nextLong(), n * in * c[5] * c[6]), n, in, c[5], c[6]);
            int[] os = conv.outputShape(x.shape());
            int p = os[2] * os[3];
            int k = in * kk * kk;
            float[] rows = TensorAccess.data(conv.im2colRows(x));
            float[] w = TensorAccess.data(conv.weight());
            float[] b = TensorAccess.data(conv.bias());
            float[] want = new float[n * out * p];
            float[] ys = new float[out * p];
            float[] col = new float[p * k];
            for (int s = 0; s < n; s++) {
                System.arraycopy(rows, s * p * k, col, 0, p * k);
                Dense.matmulTransposedB(w, col, ys, out, k, p);
                for (int o = 0; o < out; o++) {
                    for (int q = 0; q < p; q++) {
                        want[s * out * p + o * p + q] = ys[o * p + q] + b[o];
                    }
                }
            }
            assertArrayEquals(want, TensorAccess.data(conv.forward(x)), java.util.Arrays.toString(c));
        }
    }

    @Test
    void thermalConvNetForwardHasTheBitsOfTheLayerByLayerReference() {
        // Source: the sample conv net with each convolution computed as in the test above.
        Network cnn = ConvEqualizationTest.thermal().foldBatchNorm();
        Dataset data = Dataset.load(ConvEqualizationTest.SAMPLES.resolve("thermal-validation.npz"));
        float[] v = new float[37 * 256];
        System.arraycopy(data.inputs().toFloatArray(), 0, v, 0, v.length);
        Tensor x = Tensor.of(v, 37, 1, 16, 16);
        Tensor h = x;
        for (Layer l : cnn.layers()) {
            if (l instanceof Conv2d) {
                Conv2d conv = (Conv2d) l;
                int[] os = conv.outputShape(h.shape());
                int p = os[2] * os[3];
                int k = conv.inChannels() * conv.kernelHeight() * conv.kernelWidth();
                int out = conv.outChannels();
                float[] rows = TensorAccess.data(conv.im2colRows(h));
                float[] y = new float[os[0] * out * p];
                float[] ys = new float[out * p];
                float[] col = new float[p * k];
                for (int s = 0; s < os[0]; s++) {
                    System.arraycopy(rows, s * p * k, col, 0, p * k);
                    Dense.matmulTransposedB(TensorAccess.data(conv.weight()), col, ys, out, k, p);
                    for (int o = 0; o < out; o++) {
                        for (int q = 0; q < p; q++) {
                            y[s * out * p + o * p + q] = ys[o * p + q] + conv.bias().getFlat(o);
                        }
                    }
                }
                h = Tensor.of(y, os);
            } else {
                h = l.forward(h);
            }
        }
        assertArrayEquals(TensorAccess.data(h), TensorAccess.data(cnn.forward(x)));
    }
}
