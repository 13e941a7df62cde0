package dev.rungbook.nn;

import dev.rungbook.internal.TensorAccess;
import dev.rungbook.tensor.Tensor;
import java.util.ArrayList;
import java.util.LinkedHashMap;
import java.util.List;
import java.util.Map;
import java.util.function.UnaryOperator;

/**
 * An immutable sequence of layers with a float forward pass on batches. Networks are values: methods that change a
 * layer return a new network.
 */
public final class Network {
    private final List<Layer> layers;

    private Network(List<Layer> layers) {
        this.layers = List.copyOf(layers);
        if (this.layers.isEmpty()) {
            throw new IllegalArgumentException("a network needs at least one layer");
        }
    }

    /** A network of the given layers, applied in order. */
    public static Network of(Layer... layers) {
        return new Network(List.of(layers));
    }

    /** A network of the given layers, applied in order. */
    public static Network of(List<? extends Layer> layers) {
        return new Network(new ArrayList<>(layers));
    }

    /**
     * A multilayer perceptron from checkpoint-style tensors: for each name in {@code linearNames}, tensors
     * {@code NAME.weight} ([out, in]) and {@code NAME.bias} ([out]) from {@code tensors}, with a ReLU between
     * consecutive layers (none after the last).
     *
     * @throws IllegalArgumentException naming the first missing tensor or the first pair of layers that do not fit
     */
    public static Network mlp(Map<String, Tensor> tensors, String... linearNames) {
        List<Layer> out = new ArrayList<>();
        Linear previous = null;
        for (int i = 0; i < linearNames.length; i++) {
            String n = linearNames[i];
            Tensor w = tensors.get(n + ".weight");
            Tensor b = tensors.get(n + ".bias");
            if (w == null || b == null) {
                throw new IllegalArgumentException("no tensor '" + n + (w == null ? ".weight" : ".bias")
                        + "' among " + tensors.keySet());
            }
            Linear l = new Linear(n, w, b);
            if (previous != null && previous.outFeatures() != l.inFeatures()) {
                throw new IllegalArgumentException(previous.name() + " gives " + previous.outFeatures()
                        + " features but " + n + " takes " + l.inFeatures());
            }
            out.add(l);
            if (i + 1 < linearNames.length) {
                out.add(new Relu("relu" + (i + 1)));
            }
            previous = l;
        }
        return new Network(out);
    }

    /** The layers in order. */
    public List<Layer> layers() {
        return layers;
    }

    /** The linear layers in order. */
    public List<Linear> linearLayers() {
        List<Linear> out = new ArrayList<>();
        for (Layer l : layers) {
            if (l instanceof Linear) {
                out.add((Linear) l);
            }
        }
        return out;
    }

    /** The layers with weights (linear and convolution layers) in order. */
    public List<WeightedLayer> weightedLayers() {
        List<WeightedLayer> out = new ArrayList<>();
        for (Layer l : layers) {
            if (l instanceof WeightedLayer) {
                out.add((WeightedLayer) l);
            }
        }
        return out;
    }

    /** The parameters as checkpoint-style tensors ({@code NAME.weight}, {@code NAME.bias}), in layer order. */
    public Map<String, Tensor> parameters() {
        Map<String, Tensor> out = new LinkedHashMap<>();
        for (WeightedLayer l : weightedLayers()) {
            out.put(l.name() + ".weight", l.weight().withName(l.name() + ".weight"));
            out.put(l.name() + ".bias", l.bias().withName(l.name() + ".bias"));
        }
        return out;
    }

    /** A network with every linear layer replaced by {@code f(layer)}. */
    public Network mapLinear(UnaryOperator<Linear> f) {
        List<Layer> out = new ArrayList<>();
        for (Layer l : layers) {
            out.add(l instanceof Linear ? f.apply((Linear) l) : l);
        }
        return new Network(out);
    }

    /** A network with every weighted layer (linear or convolution) replaced by {@code f(layer)}. */
    public Network mapWeighted(UnaryOperator<WeightedLayer> f) {
        List<Layer> out = new ArrayList<>();
        for (Layer l : layers) {
            out.add(l instanceof WeightedLayer ? f.apply((WeightedLayer) l) : l);
        }
        return new Network(out);
    }

    /** The float forward pass on a batch [N, in]; returns the last layer's output (logits for a classifier). */
    public Tensor forward(Tensor batch) {
        Tensor x = batch;
        for (Layer l : layers) {
            x = l.forward(x);
        }
        return x;
    }

    /** The index of the largest output per sample. */
    public int[] predict(Tensor batch) {
        return topClass(forward(batch));
    }

    /** The index of the largest value in each row of logits shaped {@code [N, classes]} (the first on ties). */
    public static int[] topClass(Tensor logits) {
        int n = logits.dim(0);
        int k = logits.dim(1);
        float[] z = TensorAccess.data(logits);
        int[] out = new int[n];
        for (int i = 0; i < n; i++) {
            int best = 0;
            for (int j = 1; j < k; j++) {
                if (z[i * k + j] > z[i * k + best]) {
                    best = j;
                }
            }
            out[i] = best;
        }
        return out;
    }

    /** The share of samples whose prediction equals the label. */
    public double accuracy(Dataset data) {
        int[] p = predict(data.inputs());
        int[] y = data.labels();
        int hits = 0;
        for (int i = 0; i < p.length; i++) {
            if (p[i] == y[i]) {
                hits++;
            }
        }
        return p.length == 0 ? Double.NaN : hits / (double) p.length;
    }

    @Override
    public String toString() {
        StringBuilder sb = new StringBuilder("Network");
        for (Layer l : layers) {
            sb.append("\n  ").append(l);
        }
        return sb.toString();
    }
}
