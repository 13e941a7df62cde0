package dev.rungbook.nn;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.progress.OperationInterruptedException;
import dev.rungbook.tensor.Tensor;
import java.util.Random;
import org.junit.jupiter.api.Test;

class TrainerTest {
    /** Mean softmax cross-entropy computed in double from the network's own forward pass (an independent path). */
    private static double loss(Network net, Tensor x, int[] y) {
        Tensor z = net.forward(x);
        int k = z.dim(1);
        double total = 0;
        for (int s = 0; s < y.length; s++) {
            double max = Double.NEGATIVE_INFINITY;
            for (int c = 0; c < k; c++) {
                max = Math.max(max, z.get(s, c));
            }
            double sum = 0;
            for (int c = 0; c < k; c++) {
                sum += Math.exp(z.get(s, c) - max);
            }
            total += Math.log(sum) + max - z.get(s, y[s]);
        }
        return total / y.length;
    }

    @Test
    void gradientsMatchCentralFiniteDifferences() {
        // Source: central finite differences (f(p+h) - f(p-h)) / 2h of the loss, the textbook gradient check.
        Network net = Trainer.initialMlp(3, 5, 7, 4, 3);
        Random r = new Random(5);
        int m = 6;
        float[] xv = new float[m * 5];
        for (int i = 0; i < xv.length; i++) {
            xv[i] = (float) r.nextGaussian();
        }
        int[] y = {0, 1, 2, 1, 0, 2};
        Mlp mlp = Mlp.of(net);
        float[][] w = mlp.weights();
        float[][] b = mlp.biases();
        float[][] gw = {new float[w[0].length], new float[w[1].length], new float[w[2].length]};
        float[][] gb = {new float[b[0].length], new float[b[1].length], new float[b[2].length]};
        double l0 = mlp.lossAndGradients(w, b, xv, y, gw, gb);
        Tensor x = Tensor.of(xv, m, 5);
        assertEquals(loss(net, x, y), l0, 1e-5);
        double h = 1e-2;
        int checked = 0;
        for (int l = 0; l < 3; l++) {
            for (int i = 0; i < w[l].length; i += 3) {
                float keep = w[l][i];
                w[l][i] = (float) (keep + h);
                double up = loss(mlp.network(net, copy(w), copy(b)), x, y);
                w[l][i] = (float) (keep - h);
                double down = loss(mlp.network(net, copy(w), copy(b)), x, y);
                w[l][i] = keep;
                double numeric = (up - down) / (2 * h);
                assertEquals(numeric, gw[l][i], 2e-3 + 0.02 * Math.abs(numeric), "layer " + l + " weight " + i);
                checked++;
            }
            for (int i = 0; i < b[l].length; i++) {
                float keep = b[l][i];
                b[l][i] = (float) (keep + h);
                double up = loss(mlp.network(net, copy(w), copy(b)), x, y);
                b[l][i] = (float) (keep - h);
                double down = loss(mlp.network(net, copy(w), copy(b)), x, y);
                b[l][i] = keep;
                assertEquals((up - down) / (2 * h), gb[l][i], 2e-3, "layer " + l + " bias " + i);
            }
        }
        assertTrue(checked > 20);
    }

    private static float[][] copy(float[][] a) {
        float[][] c = new float[a.length][];
        for (int i = 0; i < a.length; i++) {
            c[i] = a[i].clone();
        }
        return c;
    }

    @Test
    void learnsASeparableProblemAndIsDeterministic() {
        // Two Gaussian blobs 4 standard deviations apart: the Bayes error is about 2.3% (Phi(-2)), so a trained
        // classifier must exceed 95% accuracy. Source: normal tail probability, Phi(-2) = 0.02275.
        Random r = new Random(9);
        int n = 600;
        float[] xv = new float[n * 2];
        int[] y = new int[n];
        for (int i = 0; i < n; i++) {
            y[i] = i % 2;
            double centre = y[i] == 0 ? -2 : 2;
            xv[2 * i] = (float) (centre + r.nextGaussian());
            xv[2 * i + 1] = (float) r.nextGaussian();
        }
        Dataset d = new Dataset(Tensor.of(xv, n, 2), y);
        Trainer t = Trainer.adam(1e-2).epochs(15).batchSize(32).seed(1);
        Network a = t.train(Trainer.initialMlp(1, 2, 8, 2), d);
        Network b = t.train(Trainer.initialMlp(1, 2, 8, 2), d);
        assertTrue(a.accuracy(d) > 0.95, "accuracy " + a.accuracy(d));
        assertEquals(a.parameters(), b.parameters());
    }

    @Test
    void stopsWhenInterrupted() {
        Dataset d = new Dataset(Tensor.of(new float[20], 10, 2), new int[10]);
        Thread.currentThread().interrupt();
        try {
            assertThrows(OperationInterruptedException.class,
                    () -> Trainer.adam(1e-3).train(Trainer.initialMlp(1, 2, 2), d));
        } finally {
            Thread.interrupted();
        }
    }

    @Test
    void rejectsMismatchedData() {
        Dataset d = new Dataset(Tensor.of(new float[30], 10, 3), new int[10]);
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                () -> Trainer.adam(1e-3).train(Trainer.initialMlp(1, 2, 2), d));
        assertTrue(e.getMessage().contains("[10, 3]"), e.getMessage());
    }
}
