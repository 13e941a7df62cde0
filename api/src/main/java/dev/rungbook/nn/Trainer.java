package dev.rungbook.nn;

import dev.rungbook.internal.TensorAccess;
import dev.rungbook.progress.Progress;
import dev.rungbook.quant.Quantizer;
import dev.rungbook.tensor.Tensor;
import java.util.ArrayList;
import java.util.List;
import java.util.Random;
import java.util.Set;

/**
 * Trains a network of {@link Linear}, {@link Conv2d}, {@link BatchNorm} (batch statistics, running averages updated),
 * {@link Relu}, {@link Relu6}, {@link Identity}, {@link Flatten} and {@link Pool2d} layers as a classifier with softmax
 * cross-entropy on seeded, shuffled mini-batches, with Adam (Kingma &amp; Ba 2015: beta1 0.9, beta2 0.999, epsilon
 * 1e-8) or SGD with momentum.
 *
 * <h2>Quantization-aware training</h2>
 * {@link #quantizeWeights(Quantizer)} fine-tunes with simulated quantization: every step, each weighted layer's
 * full-precision weight is put through the quantizer and the forward pass uses the dequantized result; the backward
 * pass hands the gradient with respect to the quantized weight straight to the full-precision copy (the
 * straight-through estimator, Bengio et al. 2013), which the optimiser updates. {@link #trainedTernary(double)}
 * instead learns ternary weights with separate positive and negative scales (TTQ, Zhu et al. 2017), and
 * {@link #learnedStepSize(int, boolean)} learns the scale of a uniform grid with the weights (LSQ). Biases stay in
 * float (they become int32 in integer execution). Fold batch norms into their layers first
 * ({@link Network#foldBatchNorm()}) so that the weights trained are the ones deployed.
 *
 * <p>An immutable spec: each step returns a new trainer; {@link #train} and {@link #run} do the work, report each
 * mini-batch's loss to the {@link Progress} listener and stop with
 * {@link dev.rungbook.progress.OperationInterruptedException} when the thread is interrupted. Defaults: 20 epochs,
 * batch 64, seed 0, no weight decay, SGD momentum 0.9, all weighted layers quantized when quantization is on.
 */
public final class Trainer {
    private enum Method { ADAM, SGD }

    /** Mutable field bag used only while building a new spec. */
    private static final class Fields {
        Method method;
        double learningRate;
        int epochs = 20;
        int batchSize = 64;
        long seed;
        double weightDecay;
        double momentum = 0.9;
        Progress progress = Progress.silent();
        Quantizer quantizer;
        double ternaryThreshold = Double.NaN;
        int stepBits;
        boolean stepPerChannel;
        Set<String> keepFloat = Set.of();
    }

    private final Fields f;

    private Trainer(Fields f) {
        this.f = f;
    }

    private Trainer with(java.util.function.Consumer<Fields> change) {
        Fields n = new Fields();
        n.method = f.method;
        n.learningRate = f.learningRate;
        n.epochs = f.epochs;
        n.batchSize = f.batchSize;
        n.seed = f.seed;
        n.weightDecay = f.weightDecay;
        n.momentum = f.momentum;
        n.progress = f.progress;
        n.quantizer = f.quantizer;
        n.ternaryThreshold = f.ternaryThreshold;
        n.stepBits = f.stepBits;
        n.stepPerChannel = f.stepPerChannel;
        n.keepFloat = f.keepFloat;
        change.accept(n);
        return new Trainer(n);
    }

    private static Trainer of(Method m, double learningRate) {
        if (!(learningRate > 0)) {
            throw new IllegalArgumentException("learning rate must be positive, got " + learningRate);
        }
        Fields f = new Fields();
        f.method = m;
        f.learningRate = learningRate;
        return new Trainer(f);
    }

    /** A trainer using Adam with the given learning rate. */
    public static Trainer adam(double learningRate) {
        return of(Method.ADAM, learningRate);
    }

    /**
     * A trainer using stochastic gradient descent with momentum ({@code v = mu v + g}, {@code p -= lr v}; momentum
     * 0.9 unless set, common practice).
     */
    public static Trainer sgd(double learningRate) {
        return of(Method.SGD, learningRate);
    }

    /** The SGD momentum, in [0, 1). */
    public Trainer momentum(double mu) {
        if (f.method != Method.SGD || !(mu >= 0 && mu < 1)) {
            throw new IllegalArgumentException("momentum applies to SGD and must be in [0, 1), got " + mu);
        }
        return with(n -> n.momentum = mu);
    }

    /** Passes over the training data. */
    public Trainer epochs(int n) {
        if (n < 1) {
            throw new IllegalArgumentException("epochs must be at least 1, got " + n);
        }
        return with(x -> x.epochs = n);
    }

    /** Samples per mini-batch. */
    public Trainer batchSize(int n) {
        if (n < 1) {
            throw new IllegalArgumentException("batch size must be at least 1, got " + n);
        }
        return with(x -> x.batchSize = n);
    }

    /** Seed for shuffling. */
    public Trainer seed(long s) {
        return with(x -> x.seed = s);
    }

    /** Decoupled weight decay per step (AdamW style), applied to weights, not biases or scales. */
    public Trainer weightDecay(double d) {
        return with(x -> x.weightDecay = d);
    }

    /** Where progress goes. */
    public Trainer progress(Progress p) {
        return with(x -> x.progress = p);
    }

    /**
     * Quantization-aware training: the forward pass uses {@code q.apply(w).dequantized()} for each weighted layer's
     * full-precision weight {@code w}, the backward pass the straight-through estimator. Any quantizer of the core
     * works (its rounding and range rule run every step).
     */
    public Trainer quantizeWeights(Quantizer q) {
        java.util.Objects.requireNonNull(q, "quantizer");
        return with(x -> {
            x.quantizer = q;
            x.ternaryThreshold = Double.NaN;
            x.stepBits = 0;
        });
    }

    /**
     * Trained ternary quantization (Zhu et al. 2017): each weighted layer's full-precision weight is divided by its
     * largest magnitude once, then every step mapped to {@code +Wp} above {@code t * max|w|}, {@code -Wn} below
     * {@code -t * max|w|} and 0 between, with the two scales {@code Wp}, {@code Wn} learned per layer. Gradients:
     * {@code dL/dWp = sum over the positive set of dL/dw_t}, {@code dL/dWn = -sum over the negative set}, and the
     * full-precision weight receives {@code Wp dL/dw_t}, {@code dL/dw_t} or {@code Wn dL/dw_t} in the three regions.
     * The scales start at the mean magnitude of each region's original weights (our choice; TWN's scale).
     *
     * @param t the threshold fraction, in (0, 1); the paper uses 0.05 (from memory)
     */
    public Trainer trainedTernary(double t) {
        if (!(t > 0 && t < 1)) {
            throw new IllegalArgumentException("ternary threshold fraction must be in (0, 1), got " + t);
        }
        return with(x -> {
            x.quantizer = null;
            x.ternaryThreshold = t;
            x.stepBits = 0;
        });
    }

    /**
     * Quantization-aware training with learned scales: learned step size quantization (Esser et al. 2020). Weights
     * become signed {@code bits}-bit codes {@code clamp(round(w / s), -2^(b-1), 2^(b-1) - 1)} times a step {@code s}
     * (one per tensor, or per output channel) that is trained with the weights, starting at {@code 2 mean|w| /
     * sqrt(Qp)}. The weight gradient is the straight-through one inside the code range and 0 where clipped; the step
     * gradient is {@code round(w/s) - w/s} inside and {@code -Qn} or {@code Qp} where clipped, scaled by
     * {@code 1 / sqrt(N Qp)}.
     *
     * @param bits code width, 2 to 16
     * @param perChannel one step per output channel (axis 0) instead of one per tensor
     */
    public Trainer learnedStepSize(int bits, boolean perChannel) {
        if (bits < 2 || bits > 16) {
            throw new IllegalArgumentException("learned step size bits must be in [2, 16], got " + bits);
        }
        return with(x -> {
            x.quantizer = null;
            x.ternaryThreshold = Double.NaN;
            x.stepBits = bits;
            x.stepPerChannel = perChannel;
        });
    }

    /** Layers (by name) that stay in full precision under quantization-aware training, e.g. the first and last. */
    public Trainer keepFloat(String... layerNames) {
        return with(x -> x.keepFloat = Set.of(layerNames));
    }

    /**
     * What a training run gives.
     *
     * @param network the trained network; under quantization-aware training its weights are the quantized ones the
     *     forward pass used (the deployable network)
     * @param fullPrecision the network with the full-precision weights the optimiser kept (the same as
     *     {@code network} without quantization; normalized latent weights under trained ternary quantization)
     * @param epochLosses the mean mini-batch loss of each epoch
     */
    public record Run(Network network, Network fullPrecision, double[] epochLosses) {
        /** Copies the losses. */
        public Run {
            epochLosses = epochLosses.clone();
        }

        @Override
        public double[] epochLosses() {
            return epochLosses.clone();
        }
    }

    /**
     * A freshly initialised MLP with layer widths {@code widths[0] -> widths[1] -> ...}, named {@code fc1, fc2, ...}
     * with ReLU between them; weights drawn from N(0, 2/in) (He initialisation), biases zero.
     */
    public static Network initialMlp(long seed, int... widths) {
        if (widths.length < 2) {
            throw new IllegalArgumentException("an MLP needs at least an input and an output width");
        }
        Random r = new Random(seed);
        List<Layer> layers = new ArrayList<>();
        for (int i = 0; i + 1 < widths.length; i++) {
            int in = widths[i];
            int out = widths[i + 1];
            float[] w = Linear.heNormal(r, out * in, in);
            layers.add(new Linear("fc" + (i + 1), Tensor.of(w, out, in), Tensor.of(new float[out], out)));
            if (i + 2 < widths.length) {
                layers.add(new Relu("relu" + (i + 1)));
            }
        }
        return Network.of(layers);
    }

    /** Trains a copy of {@code start} on {@code data} and returns it; {@code start} is not modified. */
    public Network train(Network start, Dataset data) {
        return run(start, data).network();
    }

    private WeightTransform transform(WeightedLayer l) {
        if (f.keepFloat.contains(l.name())) {
            return null;
        }
        if (f.quantizer != null) {
            return new FakeQuantization(f.quantizer, l.name() + ".weight", l.weight().shape());
        }
        if (!Double.isNaN(f.ternaryThreshold)) {
            return new TrainedTernary(f.ternaryThreshold, l.name());
        }
        if (f.stepBits > 0) {
            return new LearnedStepSize(f.stepBits, f.stepPerChannel, l.name(), l.weight().dim(0));
        }
        return null;
    }

    /** Trains a copy of {@code start} on {@code data}; {@code start} is not modified. */
    public Run run(Network start, Dataset data) {
        int features = checkFits(start, data);
        for (String k : f.keepFloat) {
            if (start.weightedLayers().stream().noneMatch(l -> l.name().equals(k))) {
                throw new IllegalArgumentException("keepFloat: no weighted layer '" + k + "' in the network");
            }
        }
        List<Node> nodes = new ArrayList<>();
        for (Layer l : start.layers()) {
            nodes.add(Node.of(l, this::transform));
        }
        List<Node.Param> params = new ArrayList<>();
        for (Node node : nodes) {
            params.addAll(node.params());
        }
        Step[] opt = new Step[params.size()];
        for (int i = 0; i < opt.length; i++) {
            int len = params.get(i).value.length;
            opt[i] = f.method == Method.ADAM ? new Adam(len) : new Sgd(len, f.momentum);
        }
        int n = data.size();
        float[] x = TensorAccess.data(data.inputs());
        int[] inShape = data.inputs().shape();
        int[] y = data.labels();
        Random r = new Random(f.seed);
        int[] order = new int[n];
        for (int i = 0; i < n; i++) {
            order[i] = i;
        }
        int batchSize = f.batchSize;
        long perEpoch = (n + batchSize - 1) / batchSize;
        long steps = f.epochs * perEpoch;
        long step = 0;
        double[] epochLoss = new double[f.epochs];
        boolean qat = f.quantizer != null || !Double.isNaN(f.ternaryThreshold) || f.stepBits > 0;
        String task = (qat ? "quantization-aware training "
                : "training ") + start.weightedLayers().size() + "-layer network";
        try {
            for (int epoch = 0; epoch < f.epochs; epoch++) {
                for (int i = n - 1; i > 0; i--) {
                    int j = r.nextInt(i + 1);
                    int t = order[i];
                    order[i] = order[j];
                    order[j] = t;
                }
                for (int first = 0; first < n; first += batchSize) {
                    Progress.checkInterrupted(task);
                    int m = Math.min(batchSize, n - first);
                    float[] bx = new float[m * features];
                    int[] by = new int[m];
                    for (int q = 0; q < m; q++) {
                        System.arraycopy(x, order[first + q] * features, bx, q * features, features);
                        by[q] = y[order[first + q]];
                    }
                    int[] shape = inShape.clone();
                    shape[0] = m;
                    double loss = lossAndGradients(nodes, params, new Node.Act(bx, shape), by);
                    epochLoss[epoch] += loss / perEpoch;
                    step++;
                    for (int i = 0; i < opt.length; i++) {
                        Node.Param p = params.get(i);
                        opt[i].step(p.value, p.grad, f.learningRate, p.decay ? f.weightDecay : 0, step);
                    }
                    f.progress.update(task, step, steps, loss);
                }
            }
        } finally {
            f.progress.finish(task);
        }
        List<Layer> out = new ArrayList<>();
        List<Layer> latent = new ArrayList<>();
        for (Node node : nodes) {
            out.add(node.layer());
            latent.add(node instanceof WeightedNode ? ((WeightedNode) node).latentLayer() : node.layer());
        }
        return new Run(Network.of(out), Network.of(latent), epochLoss);
    }

    /** The number of input values per sample, after checking that the network takes the data and has the classes. */
    private static int checkFits(Network net, Dataset data) {
        Tensor in = data.inputs();
        int[] one = in.shape().clone();
        one[0] = Math.min(1, one[0]);
        int features = one[0] == 0 ? 0 : in.size() / in.dim(0);
        Tensor z;
        try {
            z = net.forward(Tensor.of(java.util.Arrays.copyOf(TensorAccess.data(in), features), one));
        } catch (IllegalArgumentException e) {
            throw new IllegalArgumentException("training inputs shaped " + java.util.Arrays.toString(in.shape())
                    + " do not fit the network: " + e.getMessage(), e);
        }
        if (z.rank() != 2) {
            throw new IllegalArgumentException("the network's output must be logits [N, classes]; got shape "
                    + java.util.Arrays.toString(z.shape()));
        }
        if (data.classCount() > z.dim(1)) {
            throw new IllegalArgumentException("labels go up to " + (data.classCount() - 1)
                    + " but the network has " + z.dim(1) + " outputs");
        }
        return features;
    }

    /**
     * The mean softmax cross-entropy of a batch through {@code nodes} in training mode, with every parameter's
     * gradient written into its {@link Node.Param#grad} (overwritten).
     */
    static double lossAndGradients(List<Node> nodes, List<Node.Param> params, Node.Act x, int[] labels) {
        for (Node.Param p : params) {
            p.zeroGrad();
        }
        Node.Act a = x;
        for (Node node : nodes) {
            a = node.forward(a, true);
        }
        int m = labels.length;
        int classes = a.shape()[1];
        float[] z = a.v();
        float[] g = new float[m * classes];
        double loss = 0;
        for (int s = 0; s < m; s++) {
            double max = Double.NEGATIVE_INFINITY;
            for (int c = 0; c < classes; c++) {
                max = Math.max(max, z[s * classes + c]);
            }
            double sum = 0;
            for (int c = 0; c < classes; c++) {
                sum += Math.exp(z[s * classes + c] - max);
            }
            int label = labels[s];
            loss -= z[s * classes + label] - max - Math.log(sum);
            // d(mean loss)/d(logit) = (softmax - onehot) / m
            for (int c = 0; c < classes; c++) {
                double p = Math.exp(z[s * classes + c] - max) / sum;
                g[s * classes + c] = (float) ((p - (c == label ? 1 : 0)) / m);
            }
        }
        Node.Act grad = new Node.Act(g, a.shape());
        for (int i = nodes.size() - 1; i >= 0; i--) {
            grad = nodes.get(i).backward(grad, i > 0);
        }
        return loss / m;
    }

    /** One optimiser's state for one parameter array. */
    private interface Step {
        /** Updates {@code p} in place from its gradient {@code g} at step {@code t} (1-based). */
        void step(float[] p, float[] g, double lr, double decay, long t);
    }

    /** SGD with momentum. */
    private static final class Sgd implements Step {
        private final float[] v;
        private final double mu;

        Sgd(int n, double mu) {
            v = new float[n];
            this.mu = mu;
        }

        @Override
        public void step(float[] p, float[] g, double lr, double decay, long t) {
            for (int i = 0; i < p.length; i++) {
                v[i] = (float) (mu * v[i] + g[i]);
                p[i] = (float) (p[i] - lr * v[i] - lr * decay * p[i]);
            }
        }
    }

    /** Adam state for one parameter array. */
    private static final class Adam implements Step {
        private final float[] m;
        private final float[] v;

        Adam(int n) {
            m = new float[n];
            v = new float[n];
        }

        @Override
        public void step(float[] p, float[] g, double lr, double decay, long t) {
            double b1 = 0.9;
            double b2 = 0.999;
            double c1 = 1 - Math.pow(b1, t);
            double c2 = 1 - Math.pow(b2, t);
            for (int i = 0; i < p.length; i++) {
                m[i] = (float) (b1 * m[i] + (1 - b1) * g[i]);
                v[i] = (float) (b2 * v[i] + (1 - b2) * g[i] * g[i]);
                double update = lr * (m[i] / c1) / (Math.sqrt(v[i] / c2) + 1e-8);
                p[i] = (float) (p[i] - update - lr * decay * p[i]);
            }
        }
    }
}
