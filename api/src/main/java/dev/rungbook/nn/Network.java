package dev.rungbook.nn;

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

    /**
     * The parameters as checkpoint-style tensors in layer order: {@code NAME.weight} and {@code NAME.bias} of each
     * weighted layer, and {@code NAME.weight} (gamma), {@code NAME.bias} (beta), {@code NAME.running_mean} and
     * {@code NAME.running_var} of each batch norm.
     */
    public Map<String, Tensor> parameters() {
        Map<String, Tensor> out = new LinkedHashMap<>();
        for (Layer l : layers) {
            if (l instanceof WeightedLayer) {
                WeightedLayer w = (WeightedLayer) l;
                put(out, l.name() + ".weight", w.weight());
                put(out, l.name() + ".bias", w.bias());
            } else if (l instanceof BatchNorm) {
                BatchNorm b = (BatchNorm) l;
                put(out, l.name() + ".weight", b.gamma());
                put(out, l.name() + ".bias", b.beta());
                put(out, l.name() + ".running_mean", b.mean());
                put(out, l.name() + ".running_var", b.variance());
            }
        }
        return out;
    }

    private static void put(Map<String, Tensor> out, String name, Tensor t) {
        if (out.put(name, t.withName(name)) != null) {
            throw new IllegalStateException("two layers hold a tensor named '" + name + "'");
        }
    }

    /**
     * The network that an architecture text describes, with its layers read from {@code tensors} by name, e.g.
     * {@code Network.fromArchitecture(ckpt.tensors(), ckpt.metadata().get("architecture"))} for the sample
     * checkpoints. The grammar: {@code NAME [shape] [stride S] [padding P] [eps E]} for a layer read from tensors
     * (a batch norm when {@code NAME.running_mean} exists, else a convolution for a rank-4 {@code NAME.weight} and a
     * linear layer for rank 2), {@code relu}, {@code relu6}, {@code identity}, {@code flatten}, {@code maxpool K/S},
     * {@code avgpool K/S}, joined by {@code ->}; then optional notes after {@code ;}: {@code batch norm eps E} and
     * {@code widths [..]} (checked). Example: {@code conv1 [8,1,3,3] stride 1 padding 1 -> bn1 -> relu -> maxpool 2/2
     * -> flatten -> fc [4,512]}.
     *
     * @throws IllegalArgumentException naming the step and token that do not fit, or the tensor that is missing
     */
    public static Network fromArchitecture(Map<String, Tensor> tensors, String architecture) {
        return ArchitectureText.parse(tensors, architecture);
    }

    /**
     * This network's architecture text (see {@link #fromArchitecture}): {@code fromArchitecture(parameters(),
     * architecture())} computes the same function. Parameter-free layers are written by kind, not by name.
     *
     * @throws IllegalStateException if a layer is not one that an architecture text can name (e.g. a calibrated
     *     activation of a simulated network)
     */
    public String architecture() {
        return ArchitectureText.format(this);
    }

    /**
     * Starts a network built from checkpoint tensors by name (for convolutional networks and anything that is not a
     * plain MLP). For example:
     *
     * <pre>{@code
     * Network net = Network.from(checkpoint.tensors())
     *         .conv2d("conv1", 1, 1).batchNorm("bn1").relu().maxPool(2, 2)
     *         .flatten().linear("fc").build();
     * }</pre>
     */
    public static Builder from(Map<String, Tensor> tensors) {
        return new Builder(Map.copyOf(tensors), List.of());
    }

    /**
     * An immutable builder of a network from named checkpoint tensors; each step returns a new builder with one more
     * layer. Weighted layers read {@code NAME.weight} and {@code NAME.bias} (a missing bias means zeros); batch norms
     * read {@code NAME.weight} (gamma), {@code NAME.bias} (beta), {@code NAME.running_mean} and
     * {@code NAME.running_var}. Parameter-free layers are named by kind and position ({@code relu1}, {@code pool2}).
     * Missing tensors and channel counts that do not chain are reported with the layer's name.
     */
    public static final class Builder {
        private final Map<String, Tensor> tensors;
        private final List<Layer> layers;

        private Builder(Map<String, Tensor> tensors, List<Layer> layers) {
            this.tensors = tensors;
            this.layers = layers;
        }

        private Builder add(Layer l) {
            List<Layer> next = new ArrayList<>(layers);
            next.add(l);
            return new Builder(tensors, List.copyOf(next));
        }

        private Tensor tensor(String name) {
            Tensor t = tensors.get(name);
            if (t == null) {
                throw new IllegalArgumentException("no tensor '" + name + "' among " + new java.util.TreeSet<>(
                        tensors.keySet()));
            }
            return t;
        }

        private Tensor biasOr0(String name, int out) {
            Tensor b = tensors.get(name + ".bias");
            return b != null ? b : Tensor.of(new float[out], out).withName(name + ".bias");
        }

        private String next(String kind) {
            int k = 1;
            for (Layer l : layers) {
                if (l.name().startsWith(kind) && l.name().substring(kind.length()).matches("[0-9]+")) {
                    k++;
                }
            }
            return kind + k;
        }

        /** The channel count the last layer gives, or -1 if unknown (nothing yet, or after a flatten). */
        private int channels() {
            for (int i = layers.size() - 1; i >= 0; i--) {
                Layer l = layers.get(i);
                if (l instanceof WeightedLayer) {
                    return ((WeightedLayer) l).weight().dim(0);
                } else if (l instanceof BatchNorm) {
                    return ((BatchNorm) l).channels();
                } else if (l instanceof Flatten) {
                    return -1;
                }
            }
            return -1;
        }

        private void chain(String name, int in) {
            int c = channels();
            if (c >= 0 && c != in) {
                throw new IllegalArgumentException(layers.get(layers.size() - 1).name() + " gives " + c
                        + " channels but " + name + " takes " + in);
            }
        }

        /** A fully connected layer from {@code NAME.weight} [out, in] and {@code NAME.bias}. */
        public Builder linear(String name) {
            Tensor w = tensor(name + ".weight");
            Linear l = new Linear(name, w, biasOr0(name, w.rank() > 0 ? w.dim(0) : 0));
            chain(name, l.inFeatures());
            return add(l);
        }

        /** A convolution from {@code NAME.weight} [out, in, kh, kw] and {@code NAME.bias}. */
        public Builder conv2d(String name, int stride, int padding) {
            Tensor w = tensor(name + ".weight");
            Conv2d c = new Conv2d(name, w, biasOr0(name, w.rank() > 0 ? w.dim(0) : 0), stride, padding);
            chain(name, c.inChannels());
            return add(c);
        }

        /** A batch norm with eps 1e-5. */
        public Builder batchNorm(String name) {
            return batchNorm(name, BatchNorm.DEFAULT_EPS);
        }

        /** A batch norm with the given eps. */
        public Builder batchNorm(String name, double eps) {
            BatchNorm b = new BatchNorm(name, tensor(name + ".weight"), tensor(name + ".bias"),
                    tensor(name + ".running_mean"), tensor(name + ".running_var"), eps);
            chain(name, b.channels());
            return add(b);
        }

        /** A ReLU. */
        public Builder relu() {
            return add(new Relu(next("relu")));
        }

        /** A ReLU6. */
        public Builder relu6() {
            return add(new Relu6(next("relu6_")));
        }

        /** An identity layer. */
        public Builder identity() {
            return add(new Identity(next("identity")));
        }

        /** A flatten to [N, features]. */
        public Builder flatten() {
            return add(new Flatten(next("flatten")));
        }

        /** Max pooling. */
        public Builder maxPool(int kernel, int stride) {
            return add(Pool2d.max(next("pool"), kernel, stride));
        }

        /** Average pooling. */
        public Builder avgPool(int kernel, int stride) {
            return add(Pool2d.average(next("pool"), kernel, stride));
        }

        /** The network. */
        public Network build() {
            return new Network(layers);
        }
    }

    /**
     * The network with every batch norm that directly follows a linear or convolution layer folded into it:
     * {@code W'[o] = W[o] gamma_o / sqrt(var_o + eps)}, {@code b'_o = (b_o - mean_o) gamma_o / sqrt(var_o + eps)
     * + beta_o} (computed in double). The outputs are those of the inference form up to float rounding. Batch norms
     * after anything else stay.
     */
    public Network foldBatchNorm() {
        List<Layer> out = new ArrayList<>();
        for (Layer l : layers) {
            Layer prev = out.isEmpty() ? null : out.get(out.size() - 1);
            if (l instanceof BatchNorm && prev instanceof WeightedLayer) {
                out.set(out.size() - 1, fold((WeightedLayer) prev, (BatchNorm) l));
            } else {
                out.add(l);
            }
        }
        return new Network(out);
    }

    private static WeightedLayer fold(WeightedLayer layer, BatchNorm bn) {
        int c = layer.weight().dim(0);
        if (bn.channels() != c) {
            throw new IllegalArgumentException(bn.name() + " has " + bn.channels() + " channels but " + layer.name()
                    + " gives " + c);
        }
        double[] s = bn.scales();
        float[] w = layer.weight().toFloatArray();
        float[] b = layer.bias().toFloatArray();
        int per = w.length / c;
        for (int o = 0; o < c; o++) {
            for (int i = o * per; i < (o + 1) * per; i++) {
                w[i] = (float) (w[i] * s[o]);
            }
            b[o] = (float) ((b[o] - bn.mean().getFlat(o)) * s[o] + bn.beta().getFlat(o));
        }
        return layer.withWeight(Tensor.of(w, layer.weight().shape()).withName(layer.weight().name()))
                .withBias(Tensor.of(b, c).withName(layer.bias().name()));
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

    /**
     * The float forward pass (inference form: batch norms use their running statistics) on a batch whose first axis
     * is the sample index; returns the last layer's output (logits for a classifier).
     */
    public Tensor forward(Tensor batch) {
        Tensor x = batch;
        for (int i = 0; i < layers.size(); i++) {
            Layer l = layers.get(i);
            if (l instanceof Linear && i + 1 < layers.size() && layers.get(i + 1) instanceof Relu) {
                x = ((Linear) l).forwardRelu(x); // the same values as the two layers one after the other
                i++;
            } else {
                x = l.forward(x);
            }
        }
        return x;
    }

    /** The index of the largest output per sample (the first on ties). */
    public int[] predict(Tensor batch) {
        return Evaluation.argmax(forward(batch));
    }

    /** Accuracy, mean cross-entropy loss and the per-class confusion table on {@code data} (see {@link Evaluation}). */
    public Evaluation evaluate(Dataset data) {
        return Evaluation.of(this, data);
    }

    /** The index of the largest value in each row of logits shaped {@code [N, classes]} (the first on ties). */
    public static int[] topClass(Tensor logits) {
        return Evaluation.argmax(logits);
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
