package dev.rungbook.nn;

import dev.rungbook.internal.TensorAccess;
import dev.rungbook.progress.Progress;
import dev.rungbook.tensor.DType;
import dev.rungbook.tensor.Tensor;
import java.util.ArrayList;
import java.util.List;
import java.util.Random;

/**
 * Trains a network of {@link Linear}, {@link Conv2d}, {@link BatchNorm} (batch statistics, running averages updated),
 * {@link Relu}, {@link Relu6}, {@link Identity}, {@link Flatten} and {@link Pool2d} layers as a classifier with softmax
 * cross-entropy and Adam (Kingma &amp; Ba 2015: beta1 0.9, beta2 0.999, epsilon 1e-8) on seeded, shuffled mini-batches.
 *
 * <p>An immutable spec: each step returns a new trainer; {@link #train} does the work, reports each mini-batch's
 * loss to the {@link Progress} listener and stops with
 * {@link dev.rungbook.progress.OperationInterruptedException} when its thread is interrupted. Defaults: learning rate
 * 1e-3, 20 epochs, batch 64, seed 0, no weight decay.
 */
public final class Trainer {
    private final double learningRate;
    private final int epochs;
    private final int batchSize;
    private final long seed;
    private final double weightDecay;
    private final Progress progress;

    private Trainer(double learningRate, int epochs, int batchSize, long seed, double weightDecay,
            Progress progress) {
        this.learningRate = learningRate;
        this.epochs = epochs;
        this.batchSize = batchSize;
        this.seed = seed;
        this.weightDecay = weightDecay;
        this.progress = progress;
    }

    /** A trainer using Adam with the given learning rate. */
    public static Trainer adam(double learningRate) {
        if (!(learningRate > 0)) {
            throw new IllegalArgumentException("learning rate must be positive, got " + learningRate);
        }
        return new Trainer(learningRate, 20, 64, 0, 0, Progress.silent());
    }

    /** Passes over the training data. */
    public Trainer epochs(int n) {
        if (n < 1) {
            throw new IllegalArgumentException("epochs must be at least 1, got " + n);
        }
        return new Trainer(learningRate, n, batchSize, seed, weightDecay, progress);
    }

    /** Samples per mini-batch. */
    public Trainer batchSize(int n) {
        if (n < 1) {
            throw new IllegalArgumentException("batch size must be at least 1, got " + n);
        }
        return new Trainer(learningRate, epochs, n, seed, weightDecay, progress);
    }

    /** Seed for initialisation and shuffling. */
    public Trainer seed(long s) {
        return new Trainer(learningRate, epochs, batchSize, s, weightDecay, progress);
    }

    /** Decoupled weight decay per step (AdamW style), applied to weights, not biases. */
    public Trainer weightDecay(double d) {
        return new Trainer(learningRate, epochs, batchSize, seed, d, progress);
    }

    /** Where progress goes. */
    public Trainer progress(Progress p) {
        return new Trainer(learningRate, epochs, batchSize, seed, weightDecay, p);
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
            float[] w = new float[out * in];
            double sd = Math.sqrt(2.0 / in);
            for (int j = 0; j < w.length; j++) {
                w[j] = (float) (r.nextGaussian() * sd);
            }
            layers.add(new Linear("fc" + (i + 1), Tensor.of(w, out, in), Tensor.of(new float[out], out)));
            if (i + 2 < widths.length) {
                layers.add(new Relu("relu" + (i + 1)));
            }
        }
        return Network.of(layers);
    }

    /** Trains a copy of {@code start} on {@code data} and returns it; {@code start} is not modified. */
    public Network train(Network start, Dataset data) {
        List<Node> nodes = new ArrayList<>();
        for (Layer l : start.layers()) {
            nodes.add(Node.of(l, w -> null));
        }
        int features = checkFits(start, data);
        List<Node.Param> params = new ArrayList<>();
        for (Node node : nodes) {
            params.addAll(node.params());
        }
        Adam[] adam = new Adam[params.size()];
        for (int i = 0; i < adam.length; i++) {
            adam[i] = new Adam(params.get(i).value.length);
        }
        int n = data.size();
        float[] x = TensorAccess.data(data.inputs());
        int[] inShape = data.inputs().shape();
        int[] y = data.labels();
        Random r = new Random(seed);
        int[] order = new int[n];
        for (int i = 0; i < n; i++) {
            order[i] = i;
        }
        long steps = (long) epochs * ((n + batchSize - 1) / batchSize);
        long step = 0;
        String task = "training " + start.weightedLayers().size() + "-layer network";
        try {
            for (int epoch = 0; epoch < epochs; epoch++) {
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
                    step++;
                    for (int i = 0; i < adam.length; i++) {
                        Node.Param p = params.get(i);
                        adam[i].step(p.value, p.grad, learningRate, p.decay ? weightDecay : 0, step);
                    }
                    progress.update(task, step, steps, loss);
                }
            }
        } finally {
            progress.finish(task);
        }
        List<Layer> out = new ArrayList<>();
        for (Node node : nodes) {
            out.add(node.layer());
        }
        return Network.of(out);
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

    /** Adam state for one parameter array. */
    private static final class Adam {
        private final float[] m;
        private final float[] v;

        Adam(int n) {
            m = new float[n];
            v = new float[n];
        }

        void step(float[] p, float[] g, double lr, double decay, long t) {
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
