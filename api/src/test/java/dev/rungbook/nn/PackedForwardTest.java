package dev.rungbook.nn;

import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;

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
    void branchFreeRequantizationIsFixedPointApplyExactly() {
        // Source: FixedPoint.apply (the published saturating rounding doubling high multiply and rounding right
        // shift, itself checked against worked examples and BigDecimal in FixedPointTest), then the offset and clamp.
        SplittableRandom r = new SplittableRandom(41);
        int out = 64;
        int[] edges = {0, 1, -1, 2, -2, Integer.MAX_VALUE, Integer.MIN_VALUE, Integer.MAX_VALUE - 1,
            Integer.MIN_VALUE + 1, 1 << 30, -(1 << 30), 12345, -12345};
        for (int round = 0; round < 2000; round++) {
            FixedPoint[] m = new FixedPoint[out];
            int[] m0 = new int[out];
            int[] sh = new int[out];
            for (int c = 0; c < out; c++) {
                // multipliers from 2^-32 up to just below 1: shifts 0 to 31 (M0 rounding up to 1 included)
                double real = c == 0 ? Math.nextDown(1.0) : Math.scalb(r.nextDouble(0.5, 1.0), -r.nextInt(0, 32));
                m[c] = FixedPoint.of(real);
                m0[c] = m[c].multiplier();
                sh[c] = m[c].shift();
            }
            int[] acc = new int[out];
            for (int c = 0; c < out; c++) {
                acc[c] = r.nextInt(4) == 0 ? edges[r.nextInt(edges.length)]
                        : r.nextBoolean() ? r.nextInt() : r.nextInt(-1 << 20, 1 << 20);
            }
            int zy = r.nextInt(0, 256);
            int lo = r.nextBoolean() ? zy : 0;
            int qmax = 255;
            int[] y = acc.clone();
            IntegerNetwork.requantizeRow(y, 0, out, m0, sh, zy, lo, qmax);
            for (int c = 0; c < out; c++) {
                long want = Math.max(lo, Math.min(qmax, (long) zy + m[c].apply(acc[c])));
                if (sh[c] >= 0 && sh[c] <= 31) {
                    assertEquals(want, y[c], "acc " + acc[c] + ", " + m[c]);
                }
            }
        }
    }

    @Test
    void inputQuantizationIsTheClampedRoundedQuotient() {
        // Source: the definition clamp(rint(v / S_x) + z_x, 0, 2^b - 1) with Math.min/Math.max in double, as the
        // previous loop computed it; NaN gives 0 there ((int) NaN), and so must it here.
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
        int[] q = in.quantizeInput(Tensor.of(v, 40, 17));
        for (int i = 0; i < v.length; i++) {
            int want = (int) Math.max(0, Math.min(255, Math.rint(v[i] / in.inputScale()) + in.inputZeroPoint()));
            assertEquals(want, q[i], "value " + v[i]);
        }
    }
}
