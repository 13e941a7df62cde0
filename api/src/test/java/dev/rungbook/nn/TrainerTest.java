package dev.rungbook.nn;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.progress.OperationInterruptedException;
import dev.rungbook.tensor.Tensor;
import java.util.ArrayList;
import java.util.List;
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
        List<Node> nodes = new ArrayList<>();
        for (Layer l : net.layers()) {
            nodes.add(Node.of(l, q -> null));
        }
        List<Node.Param> params = new ArrayList<>();
        nodes.forEach(n -> params.addAll(n.params()));
        double l0 = Trainer.lossAndGradients(nodes, params, new Node.Act(xv, new int[] {m, 5}), y);
        Tensor x = Tensor.of(xv, m, 5);
        assertEquals(loss(net, x, y), l0, 1e-5);
        double h = 1e-2;
        int checked = 0;
        for (Node.Param p : params) {
            for (int i = 0; i < p.value.length; i += p.name.endsWith(".weight") ? 3 : 1) {
                float keep = p.value[i];
                p.value[i] = (float) (keep + h);
                double up = loss(network(nodes), x, y);
                p.value[i] = (float) (keep - h);
                double down = loss(network(nodes), x, y);
                p.value[i] = keep;
                double numeric = (up - down) / (2 * h);
                assertEquals(numeric, p.grad[i], 2e-3 + 0.02 * Math.abs(numeric), p.name + " " + i);
                checked++;
            }
        }
        assertTrue(checked > 20);
    }

    private static Network network(List<Node> nodes) {
        List<Layer> layers = new ArrayList<>();
        nodes.forEach(n -> layers.add(n.layer()));
        return Network.of(layers);
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
        Network s = Trainer.sgd(0.05).momentum(0.9).epochs(15).batchSize(32).seed(1)
                .train(Trainer.initialMlp(1, 2, 8, 2), d);
        assertTrue(s.accuracy(d) > 0.95, "SGD accuracy " + s.accuracy(d));
        assertThrows(IllegalArgumentException.class, () -> Trainer.adam(1e-3).momentum(0.9));
    }

    @Test
    void trainsAConvNetWithBatchNormAndIsDeterministic() {
        // A bright 2x2 spot in the left or the right half of a noisy 8x8 image: the class is visible to a 3x3
        // convolution and max pooling, so a trained conv net must exceed 95% accuracy (chance is 50%).
        Random r = new Random(4);
        int n = 400;
        float[] xv = new float[n * 64];
        int[] y = new int[n];
        for (int s = 0; s < n; s++) {
            y[s] = s % 2;
            for (int k = 0; k < 64; k++) {
                xv[s * 64 + k] = (float) (0.5 * r.nextGaussian());
            }
            int row = r.nextInt(7);
            int col = (y[s] == 0 ? 0 : 4) + r.nextInt(3);
            for (int u = 0; u < 2; u++) {
                for (int v = 0; v < 2; v++) {
                    xv[s * 64 + (row + u) * 8 + col + v] += 2f;
                }
            }
        }
        Dataset d = new Dataset(Tensor.of(xv, n, 1, 8, 8), y);
        Network start = Network.of(Conv2d.initial("conv1", 1, 4, 3, 1, 1, 1), BatchNorm.initial("bn1", 4),
                new Relu("relu1"), Pool2d.max("pool1", 2, 2), new Flatten("flatten"),
                Trainer.initialMlp(2, 64, 2).layers().get(0));
        Trainer t = Trainer.adam(1e-2).epochs(8).batchSize(32).seed(3);
        Network a = t.train(start, d);
        assertTrue(a.accuracy(d) > 0.95, "accuracy " + a.accuracy(d));
        assertTrue(a.accuracy(d) > start.accuracy(d) + 0.2, "untrained " + start.accuracy(d));
        BatchNorm bn = (BatchNorm) a.layers().get(1);
        assertTrue(bn.mean().getFlat(0) != 0f && bn.variance().getFlat(0) != 1f, "running statistics updated");
        assertEquals(a.parameters(), t.train(start, d).parameters());
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
