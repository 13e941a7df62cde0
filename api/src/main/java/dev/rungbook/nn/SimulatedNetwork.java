package dev.rungbook.nn;

import dev.rungbook.internal.TensorAccess;
import dev.rungbook.metrics.ErrorReport;
import dev.rungbook.progress.Progress;
import dev.rungbook.quant.Granularity;
import dev.rungbook.quant.Quantized;
import dev.rungbook.quant.Quantizer;
import dev.rungbook.range.Range;
import dev.rungbook.range.RangeContext;
import dev.rungbook.range.RangeRule;
import dev.rungbook.round.Calibration;
import dev.rungbook.round.Rounding;
import dev.rungbook.tensor.Tensor;
import java.util.ArrayList;
import java.util.Arrays;
import java.util.List;
import java.util.Optional;
import tech.tablesaw.api.DoubleColumn;
import tech.tablesaw.api.StringColumn;
import tech.tablesaw.api.Table;

/**
 * A network after post-training calibration, with a simulated ("fake-quant") forward pass: every weighted layer holds
 * its quantized-and-dequantized weight, and every quantized activation (the input and each weighted layer's output,
 * see {@link LayerQuantization}) is quantized to its calibrated grid and dequantized, so the float arithmetic in
 * between sees exactly the values an integer device would hold. Made by {@link NetworkQuantization#calibrate}.
 * Immutable.
 *
 * <p>{@link #layerErrors} finds the layer that hurts: float against quantized activations, per layer, both with that
 * layer alone quantized and cumulatively. {@link #compare} gives accuracy and loss of the float and simulated
 * networks; {@link #evaluate} a full {@link Evaluation} with the confusion table.
 */
public final class SimulatedNetwork {
    /** One weighted layer and the non-weighted layers after it, up to the next weighted layer. */
    private record Stage(WeightedLayer reference, WeightedLayer layer, Quantized weights, List<Layer> tail,
            CalibratedActivation output) {
        Tensor floatForward(Tensor x) {
            Tensor y = reference.forward(x);
            for (Layer l : tail) {
                y = l.forward(y);
            }
            return y;
        }

        Tensor quantizedForward(Tensor x) {
            Tensor y = layer.forward(x);
            for (Layer l : tail) {
                y = l.forward(y);
            }
            return output == null ? y : output.apply(y.withName(reference.name() + " output"));
        }
    }

    private final NetworkQuantization setup;
    private final CalibratedActivation input;
    private final List<Layer> prefix;
    private final List<Stage> stages;

    private SimulatedNetwork(NetworkQuantization setup, CalibratedActivation input, List<Layer> prefix,
            List<Stage> stages) {
        this.setup = setup;
        this.input = input;
        this.prefix = List.copyOf(prefix);
        this.stages = List.copyOf(stages);
    }

    /** A range rule that remembers the range its delegate chose (one segment: activations are per tensor). */
    private static final class Recording implements RangeRule {
        private final RangeRule delegate;
        private Range chosen;

        Recording(RangeRule delegate) {
            this.delegate = delegate;
        }

        @Override
        public String label() {
            return delegate.label();
        }

        @Override
        public Range range(float[] values, int from, int to, RangeContext ctx) {
            chosen = delegate.range(values, from, to, ctx);
            return chosen;
        }
    }

    /** Measures the range of {@code rule} on {@code values} and freezes {@code q} to it. */
    static CalibratedActivation calibrateActivation(String at, Quantizer q, RangeRule rule, Tensor values) {
        if (values.size() == 0) {
            throw new IllegalArgumentException(at + ": no calibration values to measure a range on");
        }
        Recording rec = new Recording(rule);
        Quantized r = q.range(rec).apply(values.withName(at + " calibration activations"));
        Range range = rec.chosen;
        Quantizer frozen = q.range(RangeRule.fixed(range.lo(), range.hi()));
        return new CalibratedActivation(at, frozen, range, r.scales().getFlat(0), r.zeroPoints().getFlat(0));
    }

    static SimulatedNetwork calibrate(NetworkQuantization setup, Tensor inputs, Progress progress) {
        if (inputs.rank() < 1 || inputs.dim(0) == 0) {
            throw new IllegalArgumentException("calibration inputs " + inputs.label() + " of shape "
                    + Arrays.toString(inputs.shape()) + " hold no sample");
        }
        String task = "calibrate";
        List<Layer> all = setup.network().layers();
        List<Layer> prefix = new ArrayList<>();
        int i = 0;
        while (i < all.size() && !(all.get(i) instanceof WeightedLayer)) {
            prefix.add(all.get(i++));
        }
        int total = setup.layers().size();
        Progress.checkInterrupted(task);
        CalibratedActivation in = setup.input().isPresent()
                ? calibrateActivation("input", setup.input().get(), setup.inputRange(), inputs) : null;
        Tensor x = in == null ? inputs : in.apply(inputs);
        for (Layer l : prefix) {
            x = l.forward(x);
        }
        List<Stage> stages = new ArrayList<>();
        while (i < all.size()) {
            Progress.checkInterrupted(task);
            WeightedLayer ref = (WeightedLayer) all.get(i++);
            List<Layer> tail = new ArrayList<>();
            while (i < all.size() && !(all.get(i) instanceof WeightedLayer)) {
                tail.add(all.get(i++));
            }
            LayerQuantization lq = setup.layer(ref.name());
            WeightedLayer layer = ref;
            Quantized qw = null;
            if (lq.weights().isPresent()) {
                Quantizer wq = lq.weights().get();
                if (lq.learnedRounding().isPresent()) {
                    Calibration cal = capture(ref, x, tail);
                    Rounding r = lq.learnedRounding().get().apply(cal);
                    if (r == null) {
                        throw new IllegalArgumentException(ref.name() + ": the learned-rounding factory returned null");
                    }
                    wq = wq.rounding(r);
                }
                // a convolution with learned rounding is quantized as its [out, in*kh*kw] matrix (see capture)
                boolean matrix = lq.learnedRounding().isPresent() && ref instanceof Conv2d;
                Tensor w = ref.weight();
                if (matrix) {
                    checkMatrixGranularity(ref, wq);
                    w = w.reshape(w.dim(0), w.size() / w.dim(0));
                }
                qw = wq.apply(w.withName(ref.name() + ".weight"), progress);
                layer = ref.withWeight(matrix ? qw.dequantized().reshape(ref.weight().shape()) : qw.dequantized());
                CalibratedActivation feeding = stages.isEmpty() ? in : stages.get(stages.size() - 1).output;
                if (setup.integerBias() && feeding != null && NetworkQuantization.isIntegerGrid(qw.spec())
                        && NetworkQuantization.isIntegerGrid(feeding.quantizer())) {
                    layer = layer.withBias(accumulatorBias(ref.bias(), qw, feeding.scale()));
                }
            }
            Tensor y = layer.forward(x);
            for (Layer l : tail) {
                y = l.forward(y);
            }
            CalibratedActivation out = null;
            if (lq.activations().isPresent()) {
                out = calibrateActivation(ref.name(), lq.activations().get(), lq.activationRange(), y);
                y = out.apply(y);
            }
            stages.add(new Stage(ref, layer, qw, List.copyOf(tail), out));
            x = y;
            progress.update(task, stages.size(), total, Double.NaN);
        }
        progress.finish(task);
        return new SimulatedNetwork(setup, in, prefix, stages);
    }

    /** {@code S_w,c S_x round(b_c / (S_w,c S_x))} per output channel (one weight scale per channel or per tensor). */
    private static Tensor accumulatorBias(Tensor bias, Quantized weights, double inputScale) {
        float[] b = TensorAccess.data(bias);
        float[] sw = TensorAccess.data(weights.scales());
        float[] out = new float[b.length];
        for (int c = 0; c < b.length; c++) {
            double acc = (double) (sw.length == 1 ? sw[0] : sw[c]) * inputScale;
            out[c] = (float) (acc * Math.rint(b[c] / acc));
        }
        return TensorAccess.wrap(out, bias.shape(), bias.dtype(), bias.name());
    }

    /**
     * The calibration inputs of {@code layer} for a learned rounding: its inputs, bias and a following ReLU. For a
     * convolution the inputs are its receptive fields as rows ({@code Conv2d.im2colRows}), one row per sample and
     * output position, so that its weight, seen as the matrix {@code [out, in*kh*kw]}, is rounded like a linear
     * layer's.
     */
    private static Calibration capture(WeightedLayer layer, Tensor x, List<Layer> tail) {
        Tensor w = layer.weight();
        if (layer instanceof Conv2d) {
            x = ((Conv2d) layer).im2colRows(x);
            w = w.reshape(w.dim(0), w.size() / w.dim(0));
        }
        if (w.rank() != 2 || x.rank() != 2 || x.dim(1) != w.dim(1)) {
            throw new IllegalArgumentException(layer.name() + ": learned rounding needs a layer that reads inputs "
                    + "[N, in] with a weight [out, in]; the weight is " + Arrays.toString(w.shape())
                    + " and the inputs are " + Arrays.toString(x.shape()));
        }
        Calibration cal = Calibration.of(x.withName(layer.name() + " calibration inputs")).withBias(layer.bias());
        if (!tail.isEmpty() && tail.get(0) instanceof Relu) {
            return cal.followedBy(Calibration.Activation.RELU);
        }
        return !tail.isEmpty() && tail.get(0) instanceof Relu6 ? cal.followedBy(Calibration.Activation.RELU6) : cal;
    }

    /** Refuses granularities whose meaning changes when a convolution weight is seen as a matrix. */
    private static void checkMatrixGranularity(WeightedLayer layer, Quantizer q) {
        Granularity g = q.granularity();
        if (g.kind() == Granularity.Kind.TENSOR || (g.kind() == Granularity.Kind.CHANNEL && g.axis() == 0)) {
            return;
        }
        throw new IllegalArgumentException(layer.name() + ": learned rounding quantizes a convolution weight as its "
                + "[out, in*kh*kw] matrix, so it needs per-tensor or per-output-channel (axis 0) weights; got "
                + q.label());
    }

    /** The set-up this network was calibrated from. */
    public NetworkQuantization setup() {
        return setup;
    }

    /** The float network. */
    public Network reference() {
        return setup.network();
    }

    /** The float network with every quantized weight replaced by its dequantized value (weight-only quantization). */
    public Network quantizedWeights() {
        List<Layer> out = new ArrayList<>(prefix);
        for (Stage s : stages) {
            out.add(s.layer);
            out.addAll(s.tail);
        }
        return Network.of(out);
    }

    /** The calibrated input quantizer, empty for a float input. */
    public Optional<CalibratedActivation> input() {
        return Optional.ofNullable(input);
    }

    /** The calibrated output quantizer of weighted layer {@code name}, empty for a float output. */
    public Optional<CalibratedActivation> output(String name) {
        return Optional.ofNullable(stage(name).output);
    }

    /** The quantized weight of weighted layer {@code name} (codes, scales, error), empty for float weights. */
    public Optional<Quantized> weights(String name) {
        return Optional.ofNullable(stage(name).weights);
    }

    private Stage stage(String name) {
        for (Stage s : stages) {
            if (s.reference.name().equals(name)) {
                return s;
            }
        }
        throw new IllegalArgumentException("no weighted layer '" + name + "' in the network; weighted layers are "
                + setup.layers().keySet());
    }

    /** The names of the weighted layers, in order. */
    public List<String> layerNames() {
        List<String> out = new ArrayList<>();
        for (Stage s : stages) {
            out.add(s.reference.name());
        }
        return out;
    }

    /** The input fake-quantized and run through the non-weighted layers before the first weighted one. */
    private Tensor quantizedInput(Tensor x) {
        Tensor y = input == null ? x : input.apply(x.withName("input"));
        for (Layer l : prefix) {
            y = l.forward(y);
        }
        return y;
    }

    /** The simulated forward pass on a batch: the last layer's (fake-quantized) output, e.g. logits. */
    public Tensor forward(Tensor batch) {
        Tensor x = quantizedInput(batch);
        for (Stage s : stages) {
            x = s.quantizedForward(x);
        }
        return x;
    }

    /** The index of the largest simulated output per sample (the first on ties). */
    public int[] predict(Tensor batch) {
        return Evaluation.argmax(forward(batch));
    }

    /** Accuracy, loss and confusion of the simulated network on {@code data}. */
    public Evaluation evaluate(Dataset data) {
        return Evaluation.of(this::forward, data);
    }

    /** Column names of {@link #layerErrors}. */
    public static final List<String> ERROR_COLUMNS = List.of("layer", "weights", "activations", "weight_sqnr_db",
            "alone_mse", "alone_sqnr_db", "alone_cosine", "alone_max_abs_error", "cumulative_mse",
            "cumulative_sqnr_db", "cumulative_cosine", "cumulative_max_abs_error");

    /**
     * Float against quantized activations, one row per quantization point ({@code input}, then each weighted layer
     * in order), with columns {@link #ERROR_COLUMNS}. The activation of a layer is its stage output (after the
     * non-weighted layers that follow it, quantized if its output is). {@code alone}: the layer's stage run with its
     * quantized weight and output quantizer on the float network's input to it, everything before it float.
     * {@code cumulative}: the simulated network up to and including that layer (input quantizer included). The
     * metrics are those of {@link ErrorReport} (MSE, SQNR in dB, cosine similarity, largest absolute error) over
     * all samples and features; {@code weight_sqnr_db} is the weight's own SQNR (NaN for float weights).
     */
    public Table layerErrors(Tensor inputs) {
        StringColumn layer = StringColumn.create(ERROR_COLUMNS.get(0));
        StringColumn weights = StringColumn.create(ERROR_COLUMNS.get(1));
        StringColumn acts = StringColumn.create(ERROR_COLUMNS.get(2));
        DoubleColumn[] m = new DoubleColumn[ERROR_COLUMNS.size() - 3];
        for (int k = 0; k < m.length; k++) {
            m[k] = DoubleColumn.create(ERROR_COLUMNS.get(k + 3));
        }
        Tensor f = inputs.withName("input (float)");
        Tensor c = input == null ? inputs : input.apply(inputs.withName("input"));
        ErrorReport e = ErrorReport.of(f, c);
        layer.append("input");
        weights.append("");
        acts.append(input == null ? "float" : input.quantizer().label());
        appendRow(m, Double.NaN, e, e);
        for (Layer l : prefix) {
            f = l.forward(f);
            c = l.forward(c);
        }
        for (Stage s : stages) {
            Progress.checkInterrupted("layer errors");
            Tensor fOut = s.floatForward(f).withName(s.reference.name() + " (float)");
            Tensor alone = s.quantizedForward(f);
            c = s.quantizedForward(c);
            layer.append(s.reference.name());
            LayerQuantization lq = setup.layer(s.reference.name());
            weights.append(lq.weightLabel());
            acts.append(s.output == null ? "float" : s.output.quantizer().label());
            appendRow(m, s.weights == null ? Double.NaN : s.weights.error().sqnrDb(), ErrorReport.of(fOut, alone),
                    ErrorReport.of(fOut, c));
            f = fOut;
        }
        Table t = Table.create("layer output errors, float vs simulated", layer, weights, acts);
        t.addColumns(m);
        return t;
    }

    private static void appendRow(DoubleColumn[] m, double weightSqnr, ErrorReport alone, ErrorReport cumulative) {
        m[0].append(weightSqnr);
        m[1].append(alone.mse());
        m[2].append(alone.sqnrDb());
        m[3].append(alone.cosine());
        m[4].append(alone.maxAbsError());
        m[5].append(cumulative.mse());
        m[6].append(cumulative.sqnrDb());
        m[7].append(cumulative.cosine());
        m[8].append(cumulative.maxAbsError());
    }

    /**
     * Accuracy and mean cross-entropy loss of the float and the simulated network on {@code data}: columns
     * {@code network} ({@code float}, {@code simulated}), {@code accuracy}, {@code loss} and
     * {@code agreement} (the share of samples where the prediction equals the float network's).
     */
    public Table compare(Dataset data) {
        Evaluation ef = Evaluation.of(reference()::forward, data);
        Evaluation es = evaluate(data);
        int[] pf = ef.predictions();
        int[] ps = es.predictions();
        int same = 0;
        for (int k = 0; k < pf.length; k++) {
            same += pf[k] == ps[k] ? 1 : 0;
        }
        double agreement = pf.length == 0 ? Double.NaN : same / (double) pf.length;
        return Table.create("float vs simulated on " + data.size() + " samples",
                StringColumn.create("network", "float", "simulated"),
                DoubleColumn.create("accuracy", ef.accuracy(), es.accuracy()),
                DoubleColumn.create("loss", ef.loss(), es.loss()),
                DoubleColumn.create("agreement", 1.0, agreement));
    }

    @Override
    public String toString() {
        StringBuilder sb = new StringBuilder("SimulatedNetwork\n  input ");
        sb.append(input == null ? "float" : input.quantizer().label());
        for (Stage s : stages) {
            sb.append("\n  ").append(s.reference.name()).append(": weights ")
                    .append(setup.layer(s.reference.name()).weightLabel()).append(", output ")
                    .append(s.output == null ? "float" : s.output.quantizer().label());
        }
        return sb.toString();
    }
}
