package dev.rungbook.nn;

import dev.rungbook.internal.TensorAccess;
import dev.rungbook.progress.Progress;
import dev.rungbook.tensor.DType;
import dev.rungbook.tensor.Tensor;
import java.util.ArrayList;
import java.util.List;
import java.util.Random;

/**
 * Trains a multilayer perceptron (linear layers with ReLU between them) as a classifier with softmax cross-entropy
 * and Adam (Kingma &amp; Ba 2015: beta1 0.9, beta2 0.999, epsilon 1e-8) on seeded, shuffled mini-batches.
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
        Mlp mlp = Mlp.of(start);
        int depth = mlp.depth();
        if (data.inputs().rank() != 2 || data.inputs().dim(1) != mlp.ins[0]) {
            throw new IllegalArgumentException("training inputs shaped "
                    + java.util.Arrays.toString(data.inputs().shape()) + " do not fit the first layer's "
                    + mlp.ins[0] + " inputs");
        }
        if (data.classCount() > mlp.outs[depth - 1]) {
            throw new IllegalArgumentException("labels go up to " + (data.classCount() - 1)
                    + " but the network has " + mlp.outs[depth - 1] + " outputs");
        }
        float[][] w = mlp.weights();
        float[][] b = mlp.biases();
        float[][] gw = new float[depth][];
        float[][] gb = new float[depth][];
        Adam[] aw = new Adam[depth];
        Adam[] ab = new Adam[depth];
        for (int l = 0; l < depth; l++) {
            gw[l] = new float[w[l].length];
            gb[l] = new float[b[l].length];
            aw[l] = new Adam(w[l].length);
            ab[l] = new Adam(b[l].length);
        }
        int n = data.size();
        int features = mlp.ins[0];
        float[] x = TensorAccess.data(data.inputs());
        int[] y = data.labels();
        Random r = new Random(seed);
        int[] order = new int[n];
        for (int i = 0; i < n; i++) {
            order[i] = i;
        }
        long steps = (long) epochs * ((n + batchSize - 1) / batchSize);
        long step = 0;
        String task = "training " + depth + "-layer MLP";
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
                    double loss = mlp.lossAndGradients(w, b, bx, by, gw, gb);
                    step++;
                    for (int l = 0; l < depth; l++) {
                        aw[l].step(w[l], gw[l], learningRate, weightDecay, step);
                        ab[l].step(b[l], gb[l], learningRate, 0, step);
                    }
                    progress.update(task, step, steps, loss);
                }
            }
        } finally {
            progress.finish(task);
        }
        return mlp.network(start, w, b);
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
