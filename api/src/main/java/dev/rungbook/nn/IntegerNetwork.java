package dev.rungbook.nn;

import dev.rungbook.internal.ForwardKernels;
import dev.rungbook.internal.Lanes;
import dev.rungbook.internal.TensorAccess;
import dev.rungbook.quant.Quantizer;
import dev.rungbook.range.RangeRule;
import dev.rungbook.round.Rounding;
import dev.rungbook.tensor.DType;
import dev.rungbook.tensor.Tensor;
import java.util.ArrayList;
import java.util.List;

/**
 * A network of linear and convolution layers run the way an integer-only device runs it (the scheme of Jacob et al.,
 * CVPR 2018): activations are unsigned {@code bits}-bit integers with a scale and zero point per tensor, calibrated
 * by min-max on calibration inputs; weights are signed, symmetric (zero point 0) with one scale per output channel;
 * products accumulate in int32; the bias is stored as int32 with scale {@code S_w * S_x}; each output is requantized
 * by a {@link FixedPoint} multiplier {@code M = S_w S_x / S_y}, offset by the output zero point and clamped, with ReLU
 * and ReLU6 folded into the clamp. The last layer's output is dequantized to float (logits).
 *
 * <p>The layers between two weighted layers run on the codes: ReLU, ReLU6 and identity are clamps, max pooling takes
 * the largest code of each window and flatten reshapes. Each of these commutes with a monotone quantizer
 * ({@code q(max(a, b)) = max(q(a), q(b))}), so running them on codes gives the codes of running them in float first,
 * as the simulated network does. A convolution reads its receptive fields from the codes ("im2col", padding with the
 * input zero point, the code of 0) and multiplies them by its weight seen as the matrix {@code [out, in*kh*kw]}.
 * Batch norms must be folded first ({@link Network#foldBatchNorm()}); average pooling, which needs its own
 * requantization, is refused.
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
    private final List<Layer> prefix;
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

    /** A convolution's geometry: input channels, kernel, stride and zero padding. */
    private record Geometry(int channels, int kh, int kw, int stride, int padding) {
        static Geometry of(WeightedLayer layer) {
            return layer instanceof Conv2d c ? new Geometry(c.inChannels(), c.kernelHeight(), c.kernelWidth(),
                    c.stride(), c.padding()) : null;
        }
    }

    /**
     * One weighted layer in integer form, with the layers after it up to the next weighted one: {@code in} is the
     * length of the rows it multiplies ({@code in*kh*kw} for a convolution, whose {@code geometry} is not null),
     * {@code lo} and {@code hi} the output clamp (ReLU and ReLU6 folded in; {@code folded} names them), {@code tail}
     * the max pools and flattens run on its codes. {@code wide} holds the weight codes as ints, [out, in],
     * {@code panels} the same packed for the forward kernel (null without the Vector API, where the plain loop runs),
     * and {@code doubleRounding} / {@code singleRounding} the per-column requantization constants of the two modes
     * (null when a shift is outside [0, 31], where {@link FixedPoint} runs per output).
     */
    private record IntLayer(String name, int in, int out, Geometry geometry, byte[] weights, int[] bias,
            float[] weightScales, FixedPoint[] multipliers, double outputScale, int outputZeroPoint, int lo, int hi,
            String folded, List<Layer> tail, int weightBits, int[] wide, int[] weightSums,
            ForwardKernels.IntPanels panels, ForwardKernels.FixedPointColumns doubleRounding,
            ForwardKernels.FixedPointColumns singleRounding) {
        IntLayer(String name, int in, int out, Geometry geometry, byte[] weights, int[] bias, float[] weightScales,
                FixedPoint[] multipliers, double outputScale, int outputZeroPoint, Clamp clamp, List<Layer> tail,
                int weightBits) {
            this(name, in, out, geometry, weights, bias, weightScales, multipliers, outputScale, outputZeroPoint,
                    clamp.lo, clamp.hi, clamp.folded, tail, weightBits, widen(weights), rowSums(weights, out, in));
        }

        IntLayer(String name, int in, int out, Geometry geometry, byte[] weights, int[] bias, float[] weightScales,
                FixedPoint[] multipliers, double outputScale, int outputZeroPoint, int lo, int hi, String folded,
                List<Layer> tail, int weightBits, int[] wide, int[] weightSums) {
            this(name, in, out, geometry, weights, bias, weightScales, multipliers, outputScale, outputZeroPoint, lo,
                    hi, folded, tail, weightBits, wide, weightSums,
                    ForwardKernels.vectorised() ? ForwardKernels.IntPanels.of(wide, out, in) : null,
                    columns(multipliers, false), columns(multipliers, true));
        }
    }

    /** An output clamp {@code [lo, hi]} and the activations folded into it ("" for none). */
    private record Clamp(int lo, int hi, String folded) {
    }

    /**
     * A weighted layer and the layers after it up to the next weighted one, split into the activations folded into
     * the clamp and the code operations (max pools, flattens).
     */
    private record Stage(WeightedLayer layer, List<Layer> after, boolean relu, boolean relu6, List<Layer> tail) {
    }

    /** Codes with their shape ({@code [N, ...]}). */
    private record Codes(int[] data, int[] shape) {
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

    private IntegerNetwork(List<Layer> prefix, List<IntLayer> layers, double inputScale, int inputZeroPoint,
            int bits, Requantization requantization) {
        this.prefix = List.copyOf(prefix);
        this.layers = List.copyOf(layers);
        this.inputScale = inputScale;
        this.inputZeroPoint = inputZeroPoint;
        this.bits = bits;
        this.requantization = requantization;
    }

    /** The same network with requantization {@code mode} (default {@link Requantization#DOUBLE_ROUNDING}). */
    public IntegerNetwork requantization(Requantization mode) {
        return new IntegerNetwork(prefix, layers, inputScale, inputZeroPoint, bits,
                java.util.Objects.requireNonNull(mode, "mode"));
    }

    /** The requantization mode. */
    public Requantization requantization() {
        return requantization;
    }

    /**
     * Converts a float network of linear and convolution layers (with ReLU, ReLU6, identity, max pooling and flatten
     * between them), calibrating activation ranges (min-max, widened to contain 0) on {@code calibration} inputs
     * ({@code [N, in]}, or {@code [N, C, H, W]} for a network that starts with a convolution).
     *
     * @param bits activation and weight width, 2 to 8
     * @throws IllegalArgumentException for bits out of range, or naming the layer the integer network does not run
     */
    public static IntegerNetwork of(Network net, Tensor calibration, int bits) {
        if (bits < 2 || bits > 8) {
            throw new IllegalArgumentException("integer network bits must be in [2, 8], got " + bits);
        }
        List<Layer> prefix = prefix(net);
        List<Stage> stages = stages(net);
        int qmax = (1 << bits) - 1;
        double[] inRange = range(TensorAccess.data(calibration));
        double sx = scaleOf(inRange, qmax);
        int zx = zeroPoint(inRange, sx, qmax);
        double inputScale = sx;
        int inputZp = zx;
        List<IntLayer> out = new ArrayList<>();
        Tensor act = calibration;
        for (Layer l : prefix) {
            act = l.forward(act);
        }
        int wmax = (1 << (bits - 1)) - 1;
        for (Stage st : stages) {
            WeightedLayer layer = st.layer;
            act = layer.forward(act);
            for (Layer l : st.after) {
                act = l.forward(act);
            }
            double[] outRange = range(TensorAccess.data(act));
            double sy = scaleOf(outRange, qmax);
            int zy = zeroPoint(outRange, sy, qmax);
            float[] w = TensorAccess.data(layer.weight());
            int o = layer.weight().dim(0);
            int in = w.length / o;
            byte[] qw = new byte[w.length];
            float[] sw = new float[o];
            for (int c = 0; c < o; c++) {
                double amax = 0;
                for (int j = 0; j < in; j++) {
                    amax = Math.max(amax, Math.abs(w[c * in + j]));
                }
                float sc = (float) (amax > 0 ? amax / wmax : 1.0);
                sw[c] = sc;
                for (int j = 0; j < in; j++) {
                    qw[c * in + j] = (byte) Math.max(-wmax, Math.min(wmax, Math.rint(w[c * in + j] / sc)));
                }
            }
            int six = (int) Math.max(0, Math.min(qmax, Math.rint(Relu6.CEILING / sy) + zy));
            out.add(new IntLayer(layer.name(), in, o, Geometry.of(layer), qw, integerBias(layer, sw, sx), sw,
                    multipliers(sw, sx, sy), sy, zy, clamp(st, zy, six, qmax), st.tail, bits));
            sx = sy;
            zx = zy;
        }
        return new IntegerNetwork(prefix, out, inputScale, inputZp, bits, Requantization.DOUBLE_ROUNDING);
    }

    /** The layers before the first weighted one: max pools, flattens and identities only. */
    private static List<Layer> prefix(Network net) {
        List<Layer> prefix = new ArrayList<>();
        for (Layer l : net.layers()) {
            if (l instanceof WeightedLayer) {
                return prefix;
            }
            if (!(l instanceof Identity)) {
                prefix.add(codeOperation(l, "before the first weighted layer"));
            }
        }
        throw new IllegalArgumentException("integer network: the network has no linear or convolution layer");
    }

    /** The weighted layers with what follows each; refuses what the integer network does not run, naming it. */
    private static List<Stage> stages(Network net) {
        List<Stage> stages = new ArrayList<>();
        List<Layer> all = net.layers();
        int i = 0;
        while (i < all.size() && !(all.get(i) instanceof WeightedLayer)) {
            i++;
        }
        while (i < all.size()) {
            Layer l = all.get(i++);
            if (!(l instanceof Linear) && !(l instanceof Conv2d)) {
                throw new IllegalArgumentException("integer network: " + l + " is a weighted layer it does not run "
                        + "(linear and convolution layers only)");
            }
            List<Layer> after = new ArrayList<>();
            List<Layer> tail = new ArrayList<>();
            boolean relu = false;
            boolean relu6 = false;
            while (i < all.size() && !(all.get(i) instanceof WeightedLayer)) {
                Layer t = all.get(i++);
                after.add(t);
                if (t instanceof Relu) {
                    relu = true;
                } else if (t instanceof Relu6) {
                    relu6 = true;
                } else if (!(t instanceof Identity)) {
                    tail.add(codeOperation(t, "after " + l.name()));
                }
            }
            stages.add(new Stage((WeightedLayer) l, List.copyOf(after), relu, relu6, List.copyOf(tail)));
        }
        return stages;
    }

    /** {@code l} if it runs on codes as it runs in float (max pooling, flatten), else an error naming it. */
    private static Layer codeOperation(Layer l, String where) {
        if (l instanceof Flatten || (l instanceof Pool2d p && p.isMax())) {
            return l;
        }
        String hint = l instanceof BatchNorm ? "; fold the batch norms into the layers first (Network.foldBatchNorm())"
                : l instanceof Pool2d ? "; average pooling needs a requantization of its own, use max pooling"
                : "";
        throw new IllegalArgumentException("integer network: " + l + " " + where + " does not run on integer codes "
                + "(ReLU, ReLU6, identity, max pooling and flatten do)" + hint);
    }

    /**
     * The output clamp of a stage whose output grid has zero point {@code zy}, code {@code six} for 6 and largest
     * code {@code qmax}: ReLU raises the floor to the code of 0, ReLU6 also lowers the ceiling to the code of 6 (a
     * monotone quantizer gives {@code q(min(y, 6)) = min(q(y), q(6))}).
     */
    private static Clamp clamp(Stage st, int zy, int six, int qmax) {
        int lo = st.relu || st.relu6 ? zy : 0;
        int hi = st.relu6 ? Math.min(qmax, six) : qmax;
        String folded = st.relu6 ? (st.relu ? "ReLU, ReLU6" : "ReLU6") : st.relu ? "ReLU" : "";
        return new Clamp(lo, hi, folded);
    }

    /**
     * The integer form of a calibrated {@link SimulatedNetwork}, with its grids taken over unchanged: the input's and
     * every layer output's scale and zero point, each weight's codes (whatever rounding chose them) and per-channel
     * or per-tensor scales. Bias and multipliers follow as in {@link #of(Network, Tensor, int)}. The two networks then
     * differ only in integer arithmetic: the bias rounded to the accumulator grid and fixed-point requantization.
     *
     * @throws IllegalArgumentException naming the layer if the network holds a layer the integer network does not run
     *     (see the class comment), or if a grid is not one this network runs: activations (input and every layer
     *     output) must share one {@code Quantizer.linear(b).asymmetric().unsigned().perTensor()} grid ({@code b} in
     *     2..8, nearest rounding, any range rule), weights {@code Quantizer.linear(c)} symmetric and signed with
     *     {@code c <= b}, per tensor or per channel of axis 0 (any range rule, any rounding)
     */
    public static IntegerNetwork of(SimulatedNetwork sim) {
        Network net = sim.reference();
        List<Layer> prefix = prefix(net);
        List<Stage> stages = stages(net);
        CalibratedActivation in = sim.input().orElseThrow(() -> new IllegalArgumentException(
                "integer network: the input must be quantized"));
        int bits = activationBits(in);
        int qmax = (1 << bits) - 1;
        List<IntLayer> out = new ArrayList<>();
        double sx = in.scale();
        for (Stage st : stages) {
            WeightedLayer layer = st.layer;
            String name = layer.name();
            CalibratedActivation a = sim.output(name).orElseThrow(() -> new IllegalArgumentException(
                    "integer network: the output of " + name + " must be quantized"));
            if (activationBits(a) != bits) {
                throw new IllegalArgumentException("integer network: " + name + " output has "
                        + activationBits(a) + "-bit activations but the input has " + bits);
            }
            dev.rungbook.quant.Quantized qw = sim.weights(name).orElseThrow(() -> new IllegalArgumentException(
                    "integer network: the weights of " + name + " must be quantized"));
            int wbits = weightBits(name, qw.spec(), bits);
            int o = layer.weight().dim(0);
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
            // the simulation's own code for 6: its grid, applied to 6
            float six = TensorAccess.data(a.apply(Tensor.of(new float[] {Relu6.CEILING}, 1)))[0];
            int sixCode = (int) Math.rint(six / sy + zy);
            out.add(new IntLayer(name, codes.length / o, o, Geometry.of(layer), qwb, integerBias(layer, sw, sx), sw,
                    multipliers(sw, sx, sy), sy, zy, clamp(st, zy, sixCode, qmax), st.tail, wbits));
            sx = sy;
        }
        return new IntegerNetwork(prefix, out, in.scale(), (int) in.zeroPoint(), bits,
                Requantization.DOUBLE_ROUNDING);
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
    private static int[] integerBias(WeightedLayer lin, float[] sw, double sx) {
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
     * Quantizes float inputs ([N, in] or [N, C, H, W]) to the input grid:
     * {@code clamp(rint(v / S_x) + z_x, 0, 2^bits - 1)} in double.
     *
     * @throws IllegalArgumentException if an input is NaN or infinite (the message names the tensor and the first
     *     such index): such a value has no place on the grid, and a code for it would be a silent wrong number
     */
    public int[] quantizeInput(Tensor x) {
        float[] v = TensorAccess.data(x);
        if (!Float.isFinite(Lanes.maxAbs(v, 0, v.length))) {
            for (int i = 0; i < v.length; i++) {
                if (!Float.isFinite(v[i])) {
                    throw new IllegalArgumentException(x.label() + ": input value " + v[i] + " at index " + i
                            + "; NaN and infinite inputs cannot be put on the integer grid");
                }
            }
        }
        return ForwardKernels.quantizeCodes(v, inputScale, inputZeroPoint, (1 << bits) - 1);
    }

    /**
     * Integer-only forward pass: returns the last layer's integer outputs (codes on its output grid), per sample
     * its outputs in row-major order ([N, classes] for a classifier), flattened. Every arithmetic step is on
     * integers.
     */
    public int[] forwardCodes(Tensor x) {
        return run(x, true).data;
    }

    private Codes run(Tensor x, boolean fixedPoint) {
        Codes a = new Codes(quantizeInput(x), x.shape());
        for (Layer l : prefix) {
            a = operate(l, a);
        }
        int zx = inputZeroPoint;
        for (int i = 0; i < layers.size(); i++) {
            a = stageCodes(i, a, zx, fixedPoint);
            zx = layers.get(i).outputZeroPoint;
        }
        return a;
    }

    /** Layer {@code i} and the code operations after it on codes {@code a} with zero point {@code zx}. */
    private Codes stageCodes(int i, Codes a, int zx, boolean fixedPoint) {
        IntLayer l = layers.get(i);
        int[] s = a.shape;
        int n = s[0];
        Codes y;
        if (l.geometry == null) {
            if (s.length != 2 || s[1] != l.in) {
                throw new IllegalArgumentException("integer network: " + l.name + " reads [N, " + l.in
                        + "], got " + java.util.Arrays.toString(s));
            }
            y = new Codes(layerCodes(i, a.data, zx, n, fixedPoint), new int[] {n, l.out});
        } else {
            Geometry g = l.geometry;
            if (s.length != 4 || s[1] != g.channels) {
                throw new IllegalArgumentException("integer network: " + l.name + " reads [N, " + g.channels
                        + ", H, W], got " + java.util.Arrays.toString(s));
            }
            int oh = (s[2] + 2 * g.padding - g.kh) / g.stride + 1;
            int ow = (s[3] + 2 * g.padding - g.kw) / g.stride + 1;
            if (s[2] + 2 * g.padding < g.kh || s[3] + 2 * g.padding < g.kw) {
                throw new IllegalArgumentException("integer network: " + l.name + ": input " + s[2] + "x" + s[3]
                        + " with padding " + g.padding + " is smaller than the kernel " + g.kh + "x" + g.kw);
            }
            int positions = oh * ow;
            int[] rows = layerCodes(i, receptiveFields(a.data, s, g, oh, ow, zx), zx, n * positions, fixedPoint);
            // rows [N * P, out] to NCHW [N, out, P]
            int[] nchw = new int[rows.length];
            for (int smp = 0; smp < n; smp++) {
                for (int q = 0; q < positions; q++) {
                    int r = (smp * positions + q) * l.out;
                    for (int c = 0; c < l.out; c++) {
                        nchw[(smp * l.out + c) * positions + q] = rows[r + c];
                    }
                }
            }
            y = new Codes(nchw, new int[] {n, l.out, oh, ow});
        }
        for (Layer t : l.tail) {
            y = operate(t, y);
        }
        return y;
    }

    /**
     * The receptive fields of codes {@code x} shaped {@code s} ([N, C, H, W]) as rows {@code [N * oh * ow, C*kh*kw]}
     * in the weight's (c, u, v) order, with the zero point {@code zx} (the code of 0) where padded.
     */
    private static int[] receptiveFields(int[] x, int[] s, Geometry g, int oh, int ow, int zx) {
        int c = s[1];
        int h = s[2];
        int wd = s[3];
        int k = c * g.kh * g.kw;
        int[] col = new int[Math.multiplyExact(Math.multiplyExact(s[0], oh * ow), k)];
        for (int smp = 0; smp < s[0]; smp++) {
            for (int i = 0; i < oh; i++) {
                for (int j = 0; j < ow; j++) {
                    int t = ((smp * oh + i) * ow + j) * k;
                    for (int ch = 0; ch < c; ch++) {
                        int plane = (smp * c + ch) * h;
                        for (int u = 0; u < g.kh; u++) {
                            int yi = i * g.stride + u - g.padding;
                            for (int v = 0; v < g.kw; v++, t++) {
                                int xj = j * g.stride + v - g.padding;
                                col[t] = yi >= 0 && yi < h && xj >= 0 && xj < wd ? x[(plane + yi) * wd + xj] : zx;
                            }
                        }
                    }
                }
            }
        }
        return col;
    }

    /** A code operation (max pooling or flatten, see {@link #codeOperation}) on codes. */
    private static Codes operate(Layer l, Codes a) {
        if (l instanceof Flatten) {
            int n = a.shape[0];
            return new Codes(a.data, new int[] {n, n == 0 ? 0 : a.data.length / n});
        }
        Pool2d p = (Pool2d) l;
        int[] in = a.shape;
        int[] os = p.outputShape(in);
        int k = p.kernel();
        int st = p.stride();
        int[] y = new int[os[0] * os[1] * os[2] * os[3]];
        for (int pl = 0; pl < in[0] * in[1]; pl++) {
            for (int i = 0; i < os[2]; i++) {
                for (int j = 0; j < os[3]; j++) {
                    int best = Integer.MIN_VALUE;
                    for (int u = 0; u < k; u++) {
                        int row = (pl * in[2] + i * st + u) * in[3] + j * st;
                        for (int v = 0; v < k; v++) {
                            best = Math.max(best, a.data[row + v]);
                        }
                    }
                    y[(pl * os[2] + i) * os[3] + j] = best;
                }
            }
        }
        return new Codes(y, os);
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
     * Layer {@code i}'s products and requantization on integer rows {@code a} ([n, in], zero point {@code zx}): int32
     * accumulation, then requantization by the fixed-point multiplier in this network's mode ({@code fixedPoint}) or
     * by the real multiplier rounded half up, clamped to the layer's clamp. The input zero point is folded into the
     * bias: {@code sum_j w_j (a_j - zx) = sum_j w_j a_j - zx sum_j w_j}, the same int32 value. The products run in
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
        int out = l.out;
        int[] folded = new int[out];
        for (int c = 0; c < out; c++) {
            folded[c] = l.bias[c] - zx * l.weightSums[c];
        }
        boolean single = requantization == Requantization.SINGLE_ROUNDING;
        ForwardKernels.FixedPointColumns columns = single ? l.singleRounding : l.doubleRounding;
        if (fixedPoint && columns != null) {
            return l.panels.codes(a, n, folded, columns, l.outputZeroPoint, l.lo, l.hi);
        }
        int[] y = l.panels.accumulate(a, n, folded);
        for (int s = 0; s < n; s++) {
            int row = s * out;
            for (int c = 0; c < out; c++) {
                y[row + c] = requantize(y[row + c], l.multipliers[c], fixedPoint, single, l.outputZeroPoint, l.lo,
                        l.hi);
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
                y[s * out + c] = requantize(folded + d0, m, fixedPoint, single, l.outputZeroPoint, l.lo, l.hi);
                if (pair) {
                    y[(s + 1) * out + c] = requantize(folded + d1, m, fixedPoint, single, l.outputZeroPoint, l.lo,
                            l.hi);
                }
            }
        }
        return y;
    }

    private static int requantize(int acc, FixedPoint m, boolean fixedPoint, boolean single, int zy, int lo, int hi) {
        long v = zy + (!fixedPoint ? Math.round(acc * m.realMultiplier())
                : single ? m.applySingleRounding(acc) : m.apply(acc));
        return (int) Math.max(lo, Math.min(hi, v));
    }

    /** Integer-only forward pass, with the last layer's codes dequantized to float (e.g. logits [N, classes]). */
    public Tensor forward(Tensor x) {
        Codes codes = run(x, true);
        IntLayer last = layers.get(layers.size() - 1);
        float[] out = new float[codes.data.length];
        for (int i = 0; i < out.length; i++) {
            out[i] = (float) ((codes.data[i] - last.outputZeroPoint) * last.outputScale);
        }
        return TensorAccess.wrap(out, codes.shape, DType.F32, null);
    }

    /**
     * The simulated ("fake-quant") counterpart: the same integer weights, biases, scales and zero points, but each
     * output computed as {@code z_y + round(acc * M)} with the real multiplier {@code M} in double precision and
     * clamped as in {@link #forwardCodes}. Returns the last layer's codes.
     */
    public int[] simulate(Tensor x) {
        return run(x, false).data;
    }

    /** The share of samples whose largest integer output is at the label (the first on ties). */
    public double accuracy(Dataset data) {
        int[] codes = forwardCodes(data.inputs());
        int[] y = data.labels();
        int k = y.length == 0 ? 0 : codes.length / y.length;
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
        for (Layer p : prefix) {
            sb.append("\n  ").append(p).append(" (on the input codes)");
        }
        for (IntLayer l : layers) {
            sb.append("\n  ").append(l.name).append(' ');
            if (l.geometry != null) {
                Geometry g = l.geometry;
                sb.append("conv ").append(g.channels).append('x').append(g.kh).append('x').append(g.kw)
                        .append(" stride ").append(g.stride).append(" pad ").append(g.padding).append(" -> ")
                        .append(l.out);
            } else {
                sb.append(l.in).append(" -> ").append(l.out);
            }
            if (!l.folded.isEmpty()) {
                sb.append(" + ").append(l.folded).append(" (folded into clamp)");
            }
            for (Layer t : l.tail) {
                sb.append(", ").append(t).append(" (on codes)");
            }
        }
        return sb.toString();
    }
}
