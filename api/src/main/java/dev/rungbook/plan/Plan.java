package dev.rungbook.plan;

import dev.rungbook.nn.Network;
import dev.rungbook.nn.WeightedLayer;
import dev.rungbook.quant.Quantized;
import dev.rungbook.quant.Quantizer;
import dev.rungbook.tensor.Tensor;
import java.nio.file.Path;
import java.util.Collections;
import java.util.LinkedHashMap;
import java.util.LinkedHashSet;
import java.util.List;
import java.util.Map;
import java.util.Objects;
import java.util.Set;

/**
 * A mixed-precision plan: for each named weighted layer, the quantizer spec of its weight. Layers the plan does not
 * name stay float. A plan may carry free-form information (for example the budget it was made for), kept as string
 * pairs. Immutable; {@link #with} returns a new plan.
 *
 * <pre>{@code
 * Plan p = Plan.of(Map.of("fc1", Quantizer.linear(4), "fc2", Quantizer.linear(8)));
 * Network q = p.apply(net);                   // weights replaced by their dequantized values
 * Map<String, Tensor> t = p.apply(tensors);   // the same for checkpoint tensors NAME.weight
 * p.write(Path.of("plan.json"));              // atomically; Plan.read(path) gives an equal plan
 * }</pre>
 *
 * <p>Plan files are small JSON documents of our own design (see {@link #toJson()}); specs are stored in their spec
 * text form ({@link Quantizer#toText()}), so a teammate can read and edit them.
 */
public final class Plan {
    private final Map<String, Quantizer> specs;
    private final Map<String, String> info;

    private Plan(Map<String, Quantizer> specs, Map<String, String> info) {
        this.specs = Collections.unmodifiableMap(new LinkedHashMap<>(specs));
        this.info = Collections.unmodifiableMap(new LinkedHashMap<>(info));
    }

    /**
     * A plan with the layers in the map's iteration order.
     *
     * @throws IllegalArgumentException if a layer name is blank
     */
    public static Plan of(Map<String, Quantizer> specs) {
        Plan p = new Plan(Map.of(), Map.of());
        for (Map.Entry<String, Quantizer> e : specs.entrySet()) {
            p = p.with(e.getKey(), e.getValue());
        }
        return p;
    }

    /**
     * The same plan with {@code layer} set to {@code spec} (added at the end when new, replaced in place otherwise).
     *
     * @throws IllegalArgumentException if the name is blank or spans lines
     */
    public Plan with(String layer, Quantizer spec) {
        Objects.requireNonNull(layer, "layer");
        Objects.requireNonNull(spec, "spec of layer '" + layer + "'");
        if (layer.isBlank() || layer.indexOf('\n') >= 0 || layer.indexOf('\r') >= 0) {
            throw new IllegalArgumentException("plan: layer name '" + layer + "' must be non-blank and on one line");
        }
        Map<String, Quantizer> m = new LinkedHashMap<>(specs);
        m.put(layer, spec);
        return new Plan(m, info);
    }

    /** The same plan with the information {@code key = value} (replacing an earlier value of {@code key}). */
    public Plan withInfo(String key, String value) {
        Objects.requireNonNull(key, "key");
        Objects.requireNonNull(value, "value of '" + key + "'");
        Map<String, String> m = new LinkedHashMap<>(info);
        m.put(key, value);
        return new Plan(specs, m);
    }

    /** The planned layers, in order. */
    public List<String> layers() {
        return List.copyOf(specs.keySet());
    }

    /** Layer name to spec, in order (unmodifiable). */
    public Map<String, Quantizer> specs() {
        return specs;
    }

    /**
     * The spec of {@code layer}.
     *
     * @throws IllegalArgumentException if the plan does not name the layer
     */
    public Quantizer spec(String layer) {
        Quantizer q = specs.get(layer);
        if (q == null) {
            throw new IllegalArgumentException("plan names no layer '" + layer + "'; it names " + specs.keySet());
        }
        return q;
    }

    /** The free-form information, in order (unmodifiable). */
    public Map<String, String> info() {
        return info;
    }

    /**
     * The network with each planned layer's weight replaced by {@code spec.apply(weight).dequantized()}; other
     * layers unchanged.
     *
     * @throws IllegalArgumentException if the plan names a layer the network has no weighted layer for, or a spec
     *     does not fit its layer (the quantizer's message names both)
     */
    public Network apply(Network network) {
        Set<String> names = new LinkedHashSet<>();
        for (WeightedLayer l : network.weightedLayers()) {
            names.add(l.name());
        }
        for (String layer : specs.keySet()) {
            if (!names.contains(layer)) {
                throw new IllegalArgumentException("plan names layer '" + layer + "', but the network's weighted "
                        + "layers are " + names);
            }
        }
        return network.mapWeighted(l -> {
            Quantizer q = specs.get(l.name());
            return q == null ? l : l.withWeight(q.apply(l.weight().withName(l.name() + ".weight")).dequantized());
        });
    }

    /**
     * Quantizes each planned layer's weight tensor {@code LAYER.weight} of checkpoint-style tensors, in plan order.
     *
     * @throws IllegalArgumentException if a tensor {@code LAYER.weight} is missing or a spec does not fit it
     */
    public Map<String, Quantized> quantize(Map<String, Tensor> tensors) {
        Map<String, Quantized> out = new LinkedHashMap<>();
        for (Map.Entry<String, Quantizer> e : specs.entrySet()) {
            String name = e.getKey() + ".weight";
            Tensor t = tensors.get(name);
            if (t == null) {
                throw new IllegalArgumentException("plan names layer '" + e.getKey() + "', but there is no tensor '"
                        + name + "'");
            }
            out.put(name, e.getValue().apply(t.name() == null ? t.withName(name) : t));
        }
        return out;
    }

    /**
     * Checkpoint-style tensors with each planned layer's {@code LAYER.weight} replaced by its dequantized values;
     * every other tensor (biases, unplanned layers) unchanged, same order.
     *
     * @throws IllegalArgumentException as {@link #quantize}
     */
    public Map<String, Tensor> apply(Map<String, Tensor> tensors) {
        Map<String, Quantized> q = quantize(tensors);
        Map<String, Tensor> out = new LinkedHashMap<>();
        for (Map.Entry<String, Tensor> e : tensors.entrySet()) {
            Quantized r = q.get(e.getKey());
            out.put(e.getKey(), r == null ? e.getValue() : r.dequantized());
        }
        return Collections.unmodifiableMap(out);
    }

    // ------------------------------------------------------------------------------------------------ plan files

    /**
     * Reads a plan file (format in {@link #toJson()}).
     *
     * @throws PlanFormatException naming the file and the field for malformed JSON, a missing, unknown or mistyped
     *     field, a duplicate layer, or a spec text that does not parse (with the parser's message naming the token)
     * @throws java.io.UncheckedIOException if the file cannot be read
     */
    public static Plan read(Path file) {
        return fromContents(PlanFile.read(file), file);
    }

    /**
     * Parses plan file bytes; {@code source} names them in messages.
     *
     * @throws PlanFormatException as {@link #read}
     */
    public static Plan parse(byte[] json, Path source) {
        return fromContents(PlanFile.parse(json, source), source);
    }

    private static Plan fromContents(PlanFile.Contents c, Path file) {
        Map<String, Quantizer> specs = new LinkedHashMap<>();
        for (int i = 0; i < c.layers().size(); i++) {
            PlanFile.Entry e = c.layers().get(i);
            try {
                specs.put(e.layer(), Quantizer.parse(e.spec()));
            } catch (IllegalArgumentException ex) {
                throw new PlanFormatException(file, "layers[" + i + "].spec", "layer '" + e.layer() + "': "
                        + ex.getMessage(), ex);
            }
        }
        return new Plan(specs, c.info());
    }

    /**
     * The plan file text, format version 1: a JSON object with {@code "rungbook_plan": 1}, {@code "layers"} (an array
     * of {@code {"layer": NAME, "spec": SPEC TEXT}} in plan order, specs in {@link Quantizer#toText()} form) and,
     * when there is any, {@code "info"} (an object of strings).
     *
     * @throws IllegalArgumentException if a spec has no text form (for example a learned rounding), naming the layer
     */
    public String toJson() {
        return new String(PlanFile.format(contents()), java.nio.charset.StandardCharsets.UTF_8);
    }

    /**
     * Writes {@link #toJson()} to {@code file} atomically.
     *
     * @throws IllegalArgumentException as {@link #toJson()}
     * @throws java.io.UncheckedIOException if the file cannot be written
     */
    public void write(Path file) {
        PlanFile.write(file, contents());
    }

    private PlanFile.Contents contents() {
        List<PlanFile.Entry> entries = new java.util.ArrayList<>();
        specs.forEach((layer, q) -> {
            try {
                entries.add(new PlanFile.Entry(layer, q.toText()));
            } catch (IllegalArgumentException e) {
                throw new IllegalArgumentException("plan: layer '" + layer + "': " + e.getMessage(), e);
            }
        });
        return new PlanFile.Contents(entries, info);
    }

    @Override
    public boolean equals(Object o) {
        return o instanceof Plan && ((Plan) o).specs.equals(specs) && ((Plan) o).info.equals(info)
                && List.copyOf(((Plan) o).specs.keySet()).equals(List.copyOf(specs.keySet()));
    }

    @Override
    public int hashCode() {
        return 31 * specs.hashCode() + info.hashCode();
    }

    /** One line per layer, for example {@code fc1: int4 sym per-channel(0)}. */
    @Override
    public String toString() {
        StringBuilder b = new StringBuilder("Plan");
        specs.forEach((k, v) -> b.append("\n  ").append(k).append(": ").append(v.label()));
        return b.toString();
    }
}
