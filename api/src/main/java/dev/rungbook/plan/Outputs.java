package dev.rungbook.plan;

import dev.rungbook.internal.TensorAccess;
import dev.rungbook.nn.Network;
import dev.rungbook.tensor.Tensor;
import java.util.Arrays;

/**
 * The float network's outputs on the evaluation inputs, and how far another network's outputs are from them.
 * Package-private.
 */
final class Outputs {
    /** Output error of a network against the float reference. */
    record Error(double logitMse, double klDivergence, double agreement, double accuracy) {
    }

    private final Tensor inputs;
    private final int[] labels;
    private final float[] reference;
    private final int n;
    private final int k;
    private final int[] referenceTop;
    private final double referenceAccuracy;

    Outputs(Network network, Tensor inputs, int[] labels) {
        this.inputs = inputs;
        this.labels = labels == null ? null : labels.clone();
        Tensor z = network.forward(inputs);
        if (z.rank() != 2 || z.dim(0) != inputs.dim(0)) {
            throw new IllegalArgumentException("the network's output is shaped " + Arrays.toString(z.shape())
                    + "; planning needs logits shaped [N, classes] for inputs shaped "
                    + Arrays.toString(inputs.shape()));
        }
        this.reference = TensorAccess.data(z);
        this.n = z.dim(0);
        this.k = z.dim(1);
        this.referenceTop = Network.topClass(z);
        if (this.labels != null) {
            for (int i = 0; i < n; i++) {
                if (this.labels[i] >= k) {
                    throw new IllegalArgumentException("label " + this.labels[i] + " of sample " + i
                            + " is not below the network's " + k + " outputs");
                }
            }
        }
        this.referenceAccuracy = this.labels == null ? Double.NaN : hits(referenceTop, this.labels) / (double) n;
    }

    Tensor inputs() {
        return inputs;
    }

    boolean hasLabels() {
        return labels != null;
    }

    int[] labels() {
        return labels == null ? null : labels.clone();
    }

    /** The float network's accuracy (NaN without labels). */
    double referenceAccuracy() {
        return referenceAccuracy;
    }

    /** The error of a whole network on the inputs. */
    Error of(Network network) {
        return of(network.forward(inputs));
    }

    /** The error of logits shaped as the reference's. */
    Error of(Tensor logits) {
        if (!Arrays.equals(logits.shape(), new int[] {n, k})) {
            throw new IllegalArgumentException("logits shaped " + Arrays.toString(logits.shape()) + ", expected ["
                    + n + ", " + k + "]");
        }
        float[] z = TensorAccess.data(logits);
        double se = 0;
        for (int i = 0; i < z.length; i++) {
            double d = (double) z[i] - reference[i];
            se += d * d;
        }
        int[] top = Network.topClass(logits);
        return new Error(n == 0 ? 0 : se / z.length, klDivergence(reference, z, n, k),
                n == 0 ? Double.NaN : hits(top, referenceTop) / (double) n,
                labels == null || n == 0 ? Double.NaN : hits(top, labels) / (double) n);
    }

    /**
     * Mean over rows of {@code KL(softmax(p) || softmax(q))} in nats, for row-major logits {@code [n, k]}; computed
     * with log-softmax in double so that large logits do not overflow.
     */
    static double klDivergence(float[] p, float[] q, int n, int k) {
        double sum = 0;
        for (int i = 0; i < n; i++) {
            int o = i * k;
            double lp = logSumExp(p, o, k);
            double lq = logSumExp(q, o, k);
            double kl = 0;
            for (int j = 0; j < k; j++) {
                double logP = p[o + j] - lp;
                double logQ = q[o + j] - lq;
                kl += Math.exp(logP) * (logP - logQ);
            }
            sum += Math.max(0, kl);
        }
        return n == 0 ? 0 : sum / n;
    }

    private static double logSumExp(float[] z, int o, int k) {
        double max = Double.NEGATIVE_INFINITY;
        for (int j = 0; j < k; j++) {
            max = Math.max(max, z[o + j]);
        }
        double s = 0;
        for (int j = 0; j < k; j++) {
            s += Math.exp(z[o + j] - max);
        }
        return max + Math.log(s);
    }

    private static int hits(int[] a, int[] b) {
        int h = 0;
        for (int i = 0; i < a.length; i++) {
            if (a[i] == b[i]) {
                h++;
            }
        }
        return h;
    }
}
