package dev.rungbook.nn;

import dev.rungbook.internal.TensorAccess;
import dev.rungbook.tensor.DType;
import dev.rungbook.tensor.Tensor;
import java.util.ArrayList;
import java.util.List;

/**
 * A network of linear layers (with ReLU between them) run the way an integer-only device runs it (the scheme of
 * Jacob et al., CVPR 2018): activations are unsigned {@code bits}-bit integers with a scale and zero point per
 * tensor, calibrated by min-max on calibration inputs; weights are signed, symmetric (zero point 0) with one scale per
 * output channel; products accumulate in int32; the bias is stored as int32 with scale {@code S_w * S_x}; each output
 * is requantized by a {@link FixedPoint} multiplier {@code M = S_w S_x / S_y}, offset by the output zero point and
 * clamped, with ReLU folded into the clamp. The last layer's output is dequantized to float (logits).
 *
 * <p>{@link #simulate} runs the same arithmetic in floating point with real multipliers (the "fake-quant" network
 * that simulated quantization computes), so the two can be compared output by output.
 */
public final class IntegerNetwork {
    private final List<IntLayer> layers;
    private final double inputScale;
    private final int inputZeroPoint;
    private final int bits;

    /** One linear layer in integer form. */
    private record IntLayer(String name, int in, int out, byte[] weights, int[] bias, float[] weightScales,
            FixedPoint[] multipliers, double outputScale, int outputZeroPoint, boolean relu, int weightBits) {
    }

    private IntegerNetwork(List<IntLayer> layers, double inputScale, int inputZeroPoint, int bits) {
        this.layers = layers;
        this.inputScale = inputScale;
        this.inputZeroPoint = inputZeroPoint;
        this.bits = bits;
    }

    /**
     * Converts a float network of linear and ReLU layers, calibrating activation ranges (min-max, widened to contain
     * 0) on {@code calibration} inputs [N, in].
     *
     * @param bits activation and weight width, 2 to 8
     */
    public static IntegerNetwork of(Network net, Tensor calibration, int bits) {
        if (bits < 2 || bits > 8) {
            throw new IllegalArgumentException("integer network bits must be in [2, 8], got " + bits);
        }
        List<Linear> linears = net.linearLayers();
        boolean[] reluAfter = reluAfter(net);
        int qmax = (1 << bits) - 1;
        double[] inRange = range(TensorAccess.data(calibration));
        double sx = scaleOf(inRange, qmax);
        int zx = zeroPoint(inRange, sx, qmax);
        double inputScale = sx;
        int inputZp = zx;
        List<IntLayer> out = new ArrayList<>();
        Tensor act = calibration;
        int wmax = (1 << (bits - 1)) - 1;
        for (int l = 0; l < linears.size(); l++) {
            Linear lin = linears.get(l);
            act = lin.forward(act);
            boolean relu = reluAfter[l];
            float[] y = TensorAccess.data(act);
            if (relu) {
                float[] r = new float[y.length];
                for (int i = 0; i < y.length; i++) {
                    r[i] = Math.max(0f, y[i]);
                }
                act = TensorAccess.wrap(r, act.shape(), DType.F32, null);
                y = r;
            }
            double[] outRange = range(y);
            double sy = scaleOf(outRange, qmax);
            int zy = zeroPoint(outRange, sy, qmax);
            int in = lin.inFeatures();
            int o = lin.outFeatures();
            float[] w = TensorAccess.data(lin.weight());
            float[] b = TensorAccess.data(lin.bias());
            byte[] qw = new byte[w.length];
            int[] qb = new int[o];
            float[] sw = new float[o];
            FixedPoint[] m = new FixedPoint[o];
            for (int c = 0; c < o; c++) {
                double amax = 0;
                for (int j = 0; j < in; j++) {
                    amax = Math.max(amax, Math.abs(w[c * in + j]));
                }
                float s = (float) (amax > 0 ? amax / wmax : 1.0);
                sw[c] = s;
                for (int j = 0; j < in; j++) {
                    qw[c * in + j] = (byte) Math.max(-wmax, Math.min(wmax, Math.rint(w[c * in + j] / s)));
                }
                double accScale = (double) s * sx;
                double qbias = Math.rint(b[c] / accScale);
                if (Math.abs(qbias) > Integer.MAX_VALUE) {
                    throw new IllegalArgumentException(lin.name() + ": bias of channel " + c
                            + " does not fit int32 at scale " + accScale);
                }
                qb[c] = (int) qbias;
                m[c] = FixedPoint.of(accScale / sy);
            }
            out.add(new IntLayer(lin.name(), in, o, qw, qb, sw, m, sy, zy, relu, bits));
            sx = sy;
            zx = zy;
        }
        return new IntegerNetwork(out, inputScale, inputZp, bits);
    }

    /** Whether a ReLU follows each linear layer; the network must start with one and hold only linear and ReLU. */
    private static boolean[] reluAfter(Network net) {
        boolean[] relu = new boolean[net.linearLayers().size()];
        int li = -1;
        for (Layer l : net.layers()) {
            if (l instanceof Linear) {
                li++;
            } else if (l instanceof Relu && li >= 0) {
                relu[li] = true;
            } else {
                throw new IllegalArgumentException("the integer network handles linear and ReLU layers starting "
                        + "with a linear layer; got " + l);
            }
        }
        return relu;
    }

    private static double[] range(float[] v) {
        double lo = 0;
        double hi = 0;
        for (float x : v) {
            if (!Float.isFinite(x)) {
                throw new IllegalArgumentException("calibration activations hold a non-finite value " + x);
            }
            lo = Math.min(lo, x);
            hi = Math.max(hi, x);
        }
        return new double[] {lo, hi};
    }

    private static double scaleOf(double[] r, int qmax) {
        double s = (r[1] - r[0]) / qmax;
        return s > 0 ? s : 1.0;
    }

    private static int zeroPoint(double[] r, double s, int qmax) {
        return (int) Math.max(0, Math.min(qmax, Math.rint(-r[0] / s)));
    }

    /** Activation and weight width. */
    public int bits() {
        return bits;
    }

    /** The input quantization scale. */
    public double inputScale() {
        return inputScale;
    }

    /** The input zero point. */
    public int inputZeroPoint() {
        return inputZeroPoint;
    }

    /** Quantizes float inputs [N, in] to the input grid. */
    public int[] quantizeInput(Tensor x) {
        float[] v = TensorAccess.data(x);
        int qmax = (1 << bits) - 1;
        int[] q = new int[v.length];
        for (int i = 0; i < v.length; i++) {
            q[i] = (int) Math.max(0, Math.min(qmax, Math.rint(v[i] / inputScale) + inputZeroPoint));
        }
        return q;
    }

    /**
     * Integer-only forward pass: returns the last layer's integer outputs (codes on its output grid), [N, classes]
     * flattened row-major. Every arithmetic step is on integers.
     */
    public int[] forwardCodes(Tensor x) {
        return run(x, true);
    }

    private int[] run(Tensor x, boolean fixedPoint) {
        int n = x.dim(0);
        int[] a = quantizeInput(x);
        int zx = inputZeroPoint;
        for (int i = 0; i < layers.size(); i++) {
            a = layerCodes(i, a, zx, n, fixedPoint);
            zx = layers.get(i).outputZeroPoint;
        }
        return a;
    }

    /** The number of layers. */
    int depth() {
        return layers.size();
    }

    /** Output zero point of layer {@code i}. */
    int outputZeroPoint(int i) {
        return layers.get(i).outputZeroPoint;
    }

    /**
     * Layer {@code i} on integer inputs {@code a} (zero point {@code zx}, {@code n} samples): int32 accumulation, then
     * requantization by the fixed-point multiplier ({@code fixedPoint}) or by the real multiplier rounded half up.
     */
    int[] layerCodes(int i, int[] a, int zx, int n, boolean fixedPoint) {
        IntLayer l = layers.get(i);
        int qmax = (1 << bits) - 1;
        int lo = l.relu ? l.outputZeroPoint : 0;
        int[] y = new int[n * l.out];
        for (int s = 0; s < n; s++) {
            int base = s * l.in;
            for (int c = 0; c < l.out; c++) {
                int acc = l.bias[c];
                int wb = c * l.in;
                for (int j = 0; j < l.in; j++) {
                    acc += l.weights[wb + j] * (a[base + j] - zx);
                }
                long v = l.outputZeroPoint + (fixedPoint ? l.multipliers[c].apply(acc)
                        : Math.round(acc * l.multipliers[c].realMultiplier()));
                y[s * l.out + c] = (int) Math.max(lo, Math.min(qmax, v));
            }
        }
        return y;
    }

    /** Integer-only forward pass, with the last layer's codes dequantized to float logits [N, classes]. */
    public Tensor forward(Tensor x) {
        int[] codes = forwardCodes(x);
        IntLayer last = layers.get(layers.size() - 1);
        float[] out = new float[codes.length];
        for (int i = 0; i < codes.length; i++) {
            out[i] = (float) ((codes[i] - last.outputZeroPoint) * last.outputScale);
        }
        return TensorAccess.wrap(out, new int[] {x.dim(0), last.out}, DType.F32, null);
    }

    /**
     * The simulated ("fake-quant") counterpart: the same integer weights, biases, scales and zero points, but each
     * output computed as {@code z_y + round(acc * M)} with the real multiplier {@code M} in double precision and
     * clamped as in {@link #forwardCodes}. Returns the last layer's codes.
     */
    public int[] simulate(Tensor x) {
        return run(x, false);
    }

    /** The share of samples whose largest integer output is at the label. */
    public double accuracy(Dataset data) {
        int[] codes = forwardCodes(data.inputs());
        int k = layers.get(layers.size() - 1).out;
        int[] y = data.labels();
        int hits = 0;
        for (int s = 0; s < y.length; s++) {
            int best = 0;
            for (int c = 1; c < k; c++) {
                if (codes[s * k + c] > codes[s * k + best]) {
                    best = c;
                }
            }
            if (best == y[s]) {
                hits++;
            }
        }
        return y.length == 0 ? Double.NaN : hits / (double) y.length;
    }

    @Override
    public String toString() {
        StringBuilder sb = new StringBuilder("IntegerNetwork (" + bits + "-bit activations and weights)");
        for (IntLayer l : layers) {
            sb.append("\n  ").append(l.name).append(' ').append(l.in).append(" -> ").append(l.out)
                    .append(l.relu ? " + ReLU (folded into clamp)" : "");
        }
        return sb.toString();
    }
}
