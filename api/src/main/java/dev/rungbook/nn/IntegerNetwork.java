package dev.rungbook.nn;

import dev.rungbook.internal.ForwardKernels;
import dev.rungbook.internal.TensorAccess;
import dev.rungbook.quant.Quantizer;
import dev.rungbook.range.RangeRule;
import dev.rungbook.round.Rounding;
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
 *
 * <p>{@link #of(SimulatedNetwork)} builds the integer form of a calibrated {@link SimulatedNetwork}, taking over its
 * grids and weight codes, so that the two agree output by output: with its default int32 bias the simulation differs
 * only by the requantization, and with {@link Requantization#SINGLE_ROUNDING} not at all on the sample network.
 * The published double rounding ({@link Requantization#DOUBLE_ROUNDING}, the default) is one step off
 * {@code round(acc * M)} more often when {@code M} is near 1, as after an imbalanced layer.
 */
public final class IntegerNetwork {
    private final List<IntLayer> layers;
    private final double inputScale;
    private final int inputZeroPoint;
    private final int bits;

    private final Requantization requantization;

    /** How an int32 accumulator is scaled to the output grid. */
    public enum Requantization {
        /**
         * The published integer-only rounding: saturating rounding doubling high multiply by {@code M0}, then a
         * rounding right shift by {@code n} ({@link FixedPoint#apply}). Two roundings: when {@code n} is small
         * ({@code M} near 1) the first one is to a coarse step and the result is one off {@code round(acc * M)}
         * more often. The default.
         */
        DOUBLE_ROUNDING,
        /**
         * One 64-bit product {@code acc * M0} and one rounding shift by {@code 31 + n}
         * ({@link FixedPoint#applySingleRounding}); still integer-only, and equal to {@code round(acc * M)} up to the
         * Q31 rounding of {@code M0}.
         */
        SINGLE_ROUNDING
    }

    /**
     * One linear layer in integer form; {@code wide} holds the weight codes as ints, [out, in], {@code panels} the
     * same packed for the forward kernel (null without the Vector API, where the plain loop runs), and
     * {@code doubleRounding} / {@code singleRounding} the per-column requantization constants of the two modes
     * (null when a shift is outside [0, 31], where {@link FixedPoint} runs per output).
     */
    private record IntLayer(String name, int in, int out, byte[] weights, int[] bias, float[] weightScales,
            FixedPoint[] multipliers, double outputScale, int outputZeroPoint, boolean relu, int weightBits,
            int[] wide, int[] weightSums, ForwardKernels.IntPanels panels, ForwardKernels.FixedPointColumns doubleRounding,
            ForwardKernels.FixedPointColumns singleRounding) {
        IntLayer(String name, int in, int out, byte[] weights, int[] bias, float[] weightScales,
                FixedPoint[] multipliers, double outputScale, int outputZeroPoint, boolean relu, int weightBits) {
            this(name, in, out, weights, bias, weightScales, multipliers, outputScale, outputZeroPoint, relu,
                    weightBits, widen(weights), rowSums(weights, out, in));
        }

        IntLayer(String name, int in, int out, byte[] weights, int[] bias, float[] weightScales,
                FixedPoint[] multipliers, double outputScale, int outputZeroPoint, boolean relu, int weightBits,
                int[] wide, int[] weightSums) {
            this(name, in, out, weights, bias, weightScales, multipliers, outputScale, outputZeroPoint, relu,
                    weightBits, wide, weightSums,
                    ForwardKernels.vectorised() ? ForwardKernels.IntPanels.of(wide, out, in) : null,
                    columns(multipliers, false), columns(multipliers, true));
        }
    }

    /** The requantization constants of {@code m}, or null if a shift is outside [0, 31]. */
    private static ForwardKernels.FixedPointColumns columns(FixedPoint[] m, boolean single) {
        int[] m0 = new int[m.length];
        int[] sh = new int[m.length];
        for (int c = 0; c < m.length; c++) {
            m0[c] = m[c].multiplier();
            sh[c] = m[c].shift();
            if (sh[c] < 0 || sh[c] > 31) {
                return null;
            }
        }
        return ForwardKernels.FixedPointColumns.of(m0, sh, single);
    }

    private static int[] widen(byte[] w) {
        int[] out = new int[w.length];
        for (int i = 0; i < w.length; i++) {
            out[i] = w[i];
        }
        return out;
    }

    private static int[] rowSums(byte[] w, int rows, int cols) {
        int[] out = new int[rows];
        for (int r = 0; r < rows; r++) {
            int sum = 0;
            for (int j = 0; j < cols; j++) {
                sum += w[r * cols + j];
            }
            out[r] = sum;
        }
        return out;
    }

    private IntegerNetwork(List<IntLayer> layers, double inputScale, int inputZeroPoint, int bits) {
        this(layers, inputScale, inputZeroPoint, bits, Requantization.DOUBLE_ROUNDING);
    }

    private IntegerNetwork(List<IntLayer> layers, double inputScale, int inputZeroPoint, int bits,
            Requantization requantization) {
        this.layers = layers;
        this.inputScale = inputScale;
        this.inputZeroPoint = inputZeroPoint;
        this.bits = bits;
        this.requantization = requantization;
    }

    /** The same network with requantization {@code mode} (default {@link Requantization#DOUBLE_ROUNDING}). */
    public IntegerNetwork requantization(Requantization mode) {
        return new IntegerNetwork(layers, inputScale, inputZeroPoint, bits,
                java.util.Objects.requireNonNull(mode, "mode"));
    }

    /** The requantization mode. */
    public Requantization requantization() {
        return requantization;
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
            byte[] qw = new byte[w.length];
            float[] sw = new float[o];
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
            }
            out.add(new IntLayer(lin.name(), in, o, qw, integerBias(lin, sw, sx), sw, multipliers(sw, sx, sy), sy,
                    zy, relu, bits));
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

    /**
     * The integer form of a calibrated {@link SimulatedNetwork}, with its grids taken over unchanged: the input's and
     * every layer output's scale and zero point, each weight's codes (whatever rounding chose them) and per-channel
     * or per-tensor scales. Bias and multipliers follow as in {@link #of(Network, Tensor, int)}. The two networks then
     * differ only in integer arithmetic: the bias rounded to the accumulator grid and fixed-point requantization.
     *
     * @throws IllegalArgumentException naming the layer if the network is not linear and ReLU layers, or if a grid
     *     is not one this network runs: activations (input and every layer output) must share one
     *     {@code Quantizer.linear(b).asymmetric().unsigned().perTensor()} grid ({@code b} in 2..8, nearest rounding,
     *     any range rule), weights {@code Quantizer.linear(c)} symmetric and signed with {@code c <= b}, per tensor
     *     or per channel of axis 0 (any range rule, any rounding)
     */
    public static IntegerNetwork of(SimulatedNetwork sim) {
        Network net = sim.reference();
        boolean[] relu = reluAfter(net);
        CalibratedActivation in = sim.input().orElseThrow(() -> new IllegalArgumentException(
                "integer network: the input must be quantized"));
        int bits = activationBits(in);
        List<Linear> linears = net.linearLayers();
        List<IntLayer> out = new ArrayList<>();
        double sx = in.scale();
        int zx = (int) in.zeroPoint();
        for (int l = 0; l < linears.size(); l++) {
            Linear lin = linears.get(l);
            String name = lin.name();
            CalibratedActivation a = sim.output(name).orElseThrow(() -> new IllegalArgumentException(
                    "integer network: the output of " + name + " must be quantized"));
            if (activationBits(a) != bits) {
                throw new IllegalArgumentException("integer network: " + name + " output has "
                        + activationBits(a) + "-bit activations but the input has " + bits);
            }
            dev.rungbook.quant.Quantized qw = sim.weights(name).orElseThrow(() -> new IllegalArgumentException(
                    "integer network: the weights of " + name + " must be quantized"));
            int wbits = weightBits(name, qw.spec(), bits);
            int o = lin.outFeatures();
            int inF = lin.inFeatures();
            int[] codes = qw.codes().toIntArray();
            byte[] qwb = new byte[codes.length];
            for (int k = 0; k < codes.length; k++) {
                qwb[k] = (byte) codes[k];
            }
            float[] scales = TensorAccess.data(qw.scales());
            float[] sw = new float[o];
            for (int c = 0; c < o; c++) {
                sw[c] = scales.length == 1 ? scales[0] : scales[c];
            }
            double sy = a.scale();
            int zy = (int) a.zeroPoint();
            out.add(new IntLayer(name, inF, o, qwb, integerBias(lin, sw, sx), sw, multipliers(sw, sx, sy), sy, zy,
                    relu[l], wbits));
            sx = sy;
            zx = zy;
        }
        return new IntegerNetwork(out, in.scale(), (int) in.zeroPoint(), bits);
    }

    private static int activationBits(CalibratedActivation a) {
        Quantizer q = a.quantizer().range(RangeRule.minMax());
        for (int b = 2; b <= 8; b++) {
            if (q.equals(Quantizer.linear(b).asymmetric().unsigned().perTensor())) {
                return b;
            }
        }
        throw new IllegalArgumentException("integer network: activation at " + a.at() + " is '"
                + a.quantizer().label() + "'; integer execution needs uint2..uint8 asym per-tensor with nearest "
                + "rounding");
    }

    private static int weightBits(String layer, Quantizer spec, int activationBits) {
        Quantizer q = spec.range(RangeRule.minMax()).rounding(Rounding.nearest());
        for (int b = 2; b <= activationBits; b++) {
            Quantizer base = Quantizer.linear(b);
            if (q.equals(base) || q.equals(base.perTensor()) || q.equals(base.narrowRange())
                    || q.equals(base.narrowRange().perTensor())) {
                return b;
            }
        }
        throw new IllegalArgumentException("integer network: weights of " + layer + " are '" + spec.label()
                + "'; integer execution needs int2..int" + activationBits + " sym, per tensor or per-channel(0)");
    }

    /** {@code round(b / (S_w S_x))} per output channel. */
    private static int[] integerBias(Linear lin, float[] sw, double sx) {
        float[] b = TensorAccess.data(lin.bias());
        int[] qb = new int[b.length];
        for (int c = 0; c < b.length; c++) {
            double accScale = (double) sw[c] * sx;
            double q = Math.rint(b[c] / accScale);
            if (Math.abs(q) > Integer.MAX_VALUE) {
                throw new IllegalArgumentException(lin.name() + ": bias of channel " + c
                        + " does not fit int32 at scale " + accScale);
            }
            qb[c] = (int) q;
        }
        return qb;
    }

    /** {@code M = S_w S_x / S_y} per output channel as fixed-point multipliers. */
    private static FixedPoint[] multipliers(float[] sw, double sx, double sy) {
        FixedPoint[] m = new FixedPoint[sw.length];
        for (int c = 0; c < sw.length; c++) {
            m[c] = FixedPoint.of((double) sw[c] * sx / sy);
        }
        return m;
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

    /**
     * Quantizes float inputs [N, in] to the input grid: {@code clamp(rint(v / S_x) + z_x, 0, 2^bits - 1)} in double,
     * NaN giving 0.
     */
    public int[] quantizeInput(Tensor x) {
        return ForwardKernels.quantizeCodes(TensorAccess.data(x), inputScale, inputZeroPoint, (1 << bits) - 1);
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
     * requantization by the fixed-point multiplier in this network's mode ({@code fixedPoint}) or by the real
     * multiplier rounded half up. The input zero point is folded into the bias:
     * {@code sum_j w_j (a_j - zx) = sum_j w_j a_j - zx sum_j w_j}, the same int32 value. The products run in
     * {@link ForwardKernels.IntPanels} (packed weights, blocks of samples and output columns held in registers) when
     * the Vector API is there, else in {@link #layerCodesPlain}; the codes are the same. With fixed-point
     * requantization and every shift in [0, 31] (the usual case: multipliers below 1, not below 2^-32) each block is
     * requantized as it leaves the registers ({@link ForwardKernels.IntPanels#codes}, in 64-bit vector lanes);
     * otherwise the accumulators are requantized one by one by {@link FixedPoint}.
     */
    int[] layerCodes(int i, int[] a, int zx, int n, boolean fixedPoint) {
        IntLayer l = layers.get(i);
        if (l.panels == null) {
            return layerCodesPlain(i, a, zx, n, fixedPoint);
        }
        int qmax = (1 << bits) - 1;
        int lo = l.relu ? l.outputZeroPoint : 0;
        int out = l.out;
        int[] folded = new int[out];
        for (int c = 0; c < out; c++) {
            folded[c] = l.bias[c] - zx * l.weightSums[c];
        }
        boolean single = requantization == Requantization.SINGLE_ROUNDING;
        ForwardKernels.FixedPointColumns columns = single ? l.singleRounding : l.doubleRounding;
        if (fixedPoint && columns != null) {
            return l.panels.codes(a, n, folded, columns, l.outputZeroPoint, lo, qmax);
        }
        int[] y = l.panels.accumulate(a, n, folded);
        for (int s = 0; s < n; s++) {
            int row = s * out;
            for (int c = 0; c < out; c++) {
                y[row + c] = requantize(y[row + c], l.multipliers[c], fixedPoint, single, l.outputZeroPoint, lo, qmax);
            }
        }
        return y;
    }

    /**
     * {@link #layerCodes} without the Vector API, as it was before the packed kernel: an int32 dot product per output
     * (a reduction the JIT vectorises) over two samples at a time, so that each weight loaded serves both. Also the
     * reference the packed kernel is tested against.
     */
    int[] layerCodesPlain(int i, int[] a, int zx, int n, boolean fixedPoint) {
        IntLayer l = layers.get(i);
        int qmax = (1 << bits) - 1;
        int lo = l.relu ? l.outputZeroPoint : 0;
        int in = l.in;
        int out = l.out;
        int[] w = l.wide;
        int[] y = new int[n * out];
        boolean single = requantization == Requantization.SINGLE_ROUNDING;
        for (int s = 0; s < n; s += 2) {
            boolean pair = s + 1 < n;
            int x0 = s * in;
            int x1 = pair ? x0 + in : x0; // an odd last sample is computed twice and stored once
            for (int c = 0; c < out; c++) {
                int wc = c * in;
                int d0 = 0;
                int d1 = 0;
                for (int j = 0; j < in; j++) {
                    int wv = w[wc + j];
                    d0 += wv * a[x0 + j];
                    d1 += wv * a[x1 + j];
                }
                int folded = l.bias[c] - zx * l.weightSums[c];
                FixedPoint m = l.multipliers[c];
                y[s * out + c] = requantize(folded + d0, m, fixedPoint, single, l.outputZeroPoint, lo, qmax);
                if (pair) {
                    y[(s + 1) * out + c] = requantize(folded + d1, m, fixedPoint, single, l.outputZeroPoint, lo, qmax);
                }
            }
        }
        return y;
    }

    private static int requantize(int acc, FixedPoint m, boolean fixedPoint, boolean single, int zy, int lo, int qmax) {
        long v = zy + (!fixedPoint ? Math.round(acc * m.realMultiplier())
                : single ? m.applySingleRounding(acc) : m.apply(acc));
        return (int) Math.max(lo, Math.min(qmax, v));
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
