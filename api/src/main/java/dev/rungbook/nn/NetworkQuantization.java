package dev.rungbook.nn;

import dev.rungbook.progress.Progress;
import dev.rungbook.quant.Quantizer;
import dev.rungbook.range.RangeRule;
import dev.rungbook.round.Calibration;
import dev.rungbook.round.Rounding;
import dev.rungbook.tensor.Tensor;
import java.util.Collections;
import java.util.LinkedHashMap;
import java.util.Map;
import java.util.Objects;
import java.util.Optional;
import java.util.function.Function;
import java.util.function.UnaryOperator;
import tech.tablesaw.api.StringColumn;
import tech.tablesaw.api.Table;

/**
 * A per-layer post-training quantization set-up for one {@link Network}: a {@link LayerQuantization} for every
 * weighted layer (linear, convolution) by name, and a quantizer for the network's input. Immutable and fluent;
 * {@link #calibrate} does the work and returns a {@link SimulatedNetwork} with a fake-quant forward pass.
 *
 * <pre>{@code
 * SimulatedNetwork sim = NetworkQuantization.of(net)                      // int8 weights and activations
 *         .weights(Quantizer.linear(4).perChannel(0))                     // every layer
 *         .activationRange(RangeRule.percentile(99.99))
 *         .layer("fc3", l -> l.weights(Quantizer.linear(8)))               // one layer
 *         .calibrate(calibration);
 * sim.layerErrors(validation.inputs());                                   // which layer hurts
 * sim.compare(validation);                                                // accuracy and loss, float vs simulated
 * }</pre>
 *
 * <p>Defaults: every weighted layer {@link LayerQuantization#standard()} (int8 symmetric per-channel weights, uint8
 * asymmetric per-tensor activations, min-max ranges); the input quantized like the activations. Layers are named by
 * {@link Layer#name()}; a name that is not a weighted layer of the network is refused with the list of names.
 *
 * <h2>Calibration</h2>
 * {@link #calibrate} runs the calibration samples through the network layer by layer as it is being quantized: the
 * input range is measured and the input fake-quantized; then for each weighted layer in order its weight is quantized
 * (a learned rounding receives the layer's inputs as the quantized network produces them, its bias and its following
 * ReLU), the layer and the non-weighted layers after it run on the quantized activations, and the output range is
 * measured on that result with the layer's range rule and fixed. Ranges thus cover the values the quantized network
 * actually produces. Range rules see the outputs of all calibration samples stacked along axis 0, in order. Biases
 * are rounded to the accumulator grid where weights and inputs are on integer grids ({@link #integerBias(boolean)}).
 */
public final class NetworkQuantization {
    private final Network network;
    private final Map<String, LayerQuantization> layers;
    private final Quantizer input;
    private final RangeRule inputRange;
    private final boolean integerBias;

    private NetworkQuantization(Network network, Map<String, LayerQuantization> layers, Quantizer input,
            RangeRule inputRange, boolean integerBias) {
        this.network = network;
        this.layers = Collections.unmodifiableMap(new LinkedHashMap<>(layers));
        this.input = input;
        this.inputRange = inputRange;
        this.integerBias = integerBias;
    }

    /**
     * Whether biases are rounded to the accumulator grid (default on): where a layer's weight is on an integer grid
     * (per tensor or per output channel) and its input activation is quantized on an integer grid, the bias of
     * output channel {@code c} becomes {@code S_w,c S_x round(b_c / (S_w,c S_x))}, the int32 bias an integer-only
     * device stores. Elsewhere the bias stays float.
     */
    public NetworkQuantization integerBias(boolean on) {
        return new NetworkQuantization(network, layers, input, inputRange, on);
    }

    /** Whether biases are rounded to the accumulator grid (see {@link #integerBias(boolean)}). */
    public boolean integerBias() {
        return integerBias;
    }

    /** True for linear integer grids (any width, symmetric or not, signed or not) per tensor or per channel 0. */
    static boolean isIntegerGrid(Quantizer q) {
        Quantizer n;
        try {
            n = q.range(RangeRule.minMax()).rounding(Rounding.nearest());
        } catch (IllegalArgumentException e) {
            return false; // grids without a range rule or rounding (binary, ternary, codebook, MX) are not integer
        }
        for (int b = 2; b <= 16; b++) {
            Quantizer base = Quantizer.linear(b);
            for (Quantizer v : new Quantizer[] {base, base.asymmetric(), base.unsigned(), base.asymmetric().unsigned()}) {
                for (Quantizer g : new Quantizer[] {v, v.narrowRange()}) {
                    if (n.equals(g) || n.equals(g.perTensor())) {
                        return true;
                    }
                }
            }
        }
        return false;
    }

    /**
     * The default set-up for {@code network} (see the class description).
     *
     * @throws IllegalArgumentException if the network has no weighted layer or two weighted layers share a name
     */
    public static NetworkQuantization of(Network network) {
        Objects.requireNonNull(network, "network");
        Map<String, LayerQuantization> m = new LinkedHashMap<>();
        for (WeightedLayer l : network.weightedLayers()) {
            if (m.put(l.name(), LayerQuantization.standard()) != null) {
                throw new IllegalArgumentException("two weighted layers are named '" + l.name()
                        + "'; layer names must be unique to be quantized per layer");
            }
        }
        if (m.isEmpty()) {
            throw new IllegalArgumentException("network has no weighted layer to quantize: " + network);
        }
        LayerQuantization d = LayerQuantization.standard();
        return new NetworkQuantization(network, m, d.activations().orElseThrow(), d.activationRange(), true);
    }

    private NetworkQuantization mapAll(UnaryOperator<LayerQuantization> f) {
        Map<String, LayerQuantization> m = new LinkedHashMap<>();
        layers.forEach((k, v) -> m.put(k, f.apply(v)));
        return new NetworkQuantization(network, m, input, inputRange, integerBias);
    }

    /** Every weighted layer's weights with {@code q}. */
    public NetworkQuantization weights(Quantizer q) {
        Objects.requireNonNull(q, "weight quantizer");
        return mapAll(l -> l.weights(q));
    }

    /** Every weighted layer with float weights. */
    public NetworkQuantization floatWeights() {
        return mapAll(LayerQuantization::floatWeights);
    }

    /**
     * Every weighted layer with a learned rounding made from its captured calibration inputs, e.g.
     * {@code Rounding::errorFeedback} (see {@link LayerQuantization#learnedRounding}).
     */
    public NetworkQuantization learnedRounding(Function<Calibration, ? extends Rounding> factory) {
        Objects.requireNonNull(factory, "rounding factory");
        return mapAll(l -> l.learnedRounding(factory));
    }

    /** Every weighted layer's output and the input with activation quantizer {@code q} (one scale per tensor). */
    public NetworkQuantization activations(Quantizer q) {
        LayerQuantization.checkActivationQuantizer(Objects.requireNonNull(q, "activation quantizer"),
                "activation quantizer");
        NetworkQuantization n = mapAll(l -> l.activations(q));
        return new NetworkQuantization(network, n.layers, q, inputRange, integerBias);
    }

    /** Every output and the input in float: weight-only quantization. */
    public NetworkQuantization floatActivations() {
        NetworkQuantization n = mapAll(LayerQuantization::floatActivations);
        return new NetworkQuantization(network, n.layers, null, inputRange, integerBias);
    }

    /** The range rule of every output activation and of the input (see {@link LayerQuantization#activationRange}). */
    public NetworkQuantization activationRange(RangeRule rule) {
        Objects.requireNonNull(rule, "range");
        NetworkQuantization n = mapAll(l -> l.activationRange(rule));
        return new NetworkQuantization(network, n.layers, input, rule, integerBias);
    }

    /** The input's quantizer (one scale per tensor) and range rule. */
    public NetworkQuantization input(Quantizer q, RangeRule rule) {
        LayerQuantization.checkActivationQuantizer(Objects.requireNonNull(q, "input quantizer"), "input quantizer");
        return new NetworkQuantization(network, layers, q, Objects.requireNonNull(rule, "range"), integerBias);
    }

    /** The input in float. */
    public NetworkQuantization floatInput() {
        return new NetworkQuantization(network, layers, null, inputRange, integerBias);
    }

    /**
     * Layer {@code name} set up by {@code f} applied to its current set-up, e.g.
     * {@code layer("fc1", l -> l.weights(Quantizer.linear(4)).floatActivations())}.
     *
     * @throws IllegalArgumentException if {@code name} is not a weighted layer of the network
     */
    public NetworkQuantization layer(String name, UnaryOperator<LayerQuantization> f) {
        LayerQuantization current = layerOf(name);
        Map<String, LayerQuantization> m = new LinkedHashMap<>(layers);
        m.put(name, Objects.requireNonNull(f.apply(current), "layer set-up for " + name));
        return new NetworkQuantization(network, m, input, inputRange, integerBias);
    }

    /**
     * The weight quantizers of some layers by name (for example a mixed-precision choice per layer); layers not in
     * the map keep theirs, and everything else of each layer stays.
     *
     * @throws IllegalArgumentException naming the first key that is not a weighted layer of the network
     */
    public NetworkQuantization weightQuantizers(Map<String, Quantizer> byLayer) {
        Objects.requireNonNull(byLayer, "weight quantizers");
        Map<String, LayerQuantization> m = new LinkedHashMap<>(layers);
        for (Map.Entry<String, Quantizer> e : byLayer.entrySet()) {
            LayerQuantization current = layerOf(e.getKey());
            m.put(e.getKey(), current.weights(Objects.requireNonNull(e.getValue(), "quantizer for " + e.getKey())));
        }
        return new NetworkQuantization(network, m, input, inputRange, integerBias);
    }

    private LayerQuantization layerOf(String name) {
        LayerQuantization l = layers.get(name);
        if (l == null) {
            throw new IllegalArgumentException("no weighted layer '" + name + "' in the network; weighted layers are "
                    + layers.keySet());
        }
        return l;
    }

    /** The network this set-up is for. */
    public Network network() {
        return network;
    }

    /** The set-up of every weighted layer by name, in layer order. */
    public Map<String, LayerQuantization> layers() {
        return layers;
    }

    /** The set-up of layer {@code name}. */
    public LayerQuantization layer(String name) {
        return layerOf(name);
    }

    /** The input quantizer, empty for a float input. */
    public Optional<Quantizer> input() {
        return Optional.ofNullable(input);
    }

    /** The input's range rule. */
    public RangeRule inputRange() {
        return inputRange;
    }

    /** Calibrates on {@code inputs} ([N, ...]); see the class description. */
    public SimulatedNetwork calibrate(Tensor inputs) {
        return calibrate(inputs, Progress.silent());
    }

    /** Calibrates on the inputs of {@code data} (labels are not used). */
    public SimulatedNetwork calibrate(Dataset data) {
        return calibrate(data.inputs(), Progress.silent());
    }

    /**
     * Calibrates on {@code inputs}, reporting each layer (and learned roundings' own progress) to {@code progress};
     * stops with an {@link dev.rungbook.progress.OperationInterruptedException} when the thread is interrupted.
     *
     * @throws IllegalArgumentException if the inputs do not fit the network, hold no sample or non-finite values, or
     *     a quantizer does not fit its layer (the message names the layer)
     */
    public SimulatedNetwork calibrate(Tensor inputs, Progress progress) {
        Objects.requireNonNull(inputs, "inputs");
        Objects.requireNonNull(progress, "progress");
        return SimulatedNetwork.calibrate(this, inputs, progress);
    }

    /** One row per quantization point: {@code at} (input or layer name), {@code weights}, {@code activations}. */
    public Table table() {
        StringColumn at = StringColumn.create("at");
        StringColumn w = StringColumn.create("weights");
        StringColumn a = StringColumn.create("activations");
        at.append("input");
        w.append("");
        a.append(input == null ? "float" : input.label() + " " + inputRange.label());
        layers.forEach((name, l) -> {
            at.append(name);
            w.append(l.weightLabel());
            a.append(l.activationLabel());
        });
        return Table.create("quantization set-up", at, w, a);
    }

    @Override
    public boolean equals(Object o) {
        if (!(o instanceof NetworkQuantization)) {
            return false;
        }
        NetworkQuantization n = (NetworkQuantization) o;
        return network.equals(n.network) && layers.equals(n.layers) && Objects.equals(input, n.input)
                && inputRange.equals(n.inputRange) && integerBias == n.integerBias;
    }

    @Override
    public int hashCode() {
        return Objects.hash(network, layers, input, inputRange, integerBias);
    }

    @Override
    public String toString() {
        StringBuilder sb = new StringBuilder("NetworkQuantization\n  input ");
        sb.append(input == null ? "float" : input.label() + " " + inputRange.label());
        layers.forEach((name, l) -> sb.append("\n  ").append(name).append(": ").append(l));
        return sb.toString();
    }
}
