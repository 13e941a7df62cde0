package dev.rungbook.nn;

import dev.rungbook.internal.TensorAccess;
import dev.rungbook.tensor.Tensor;
import java.util.Arrays;
import java.util.Objects;
import java.util.function.Function;
import tech.tablesaw.api.DoubleColumn;
import tech.tablesaw.api.IntColumn;
import tech.tablesaw.api.Table;

/**
 * How a classifier does on a {@link Dataset}: accuracy, mean cross-entropy loss and the per-class confusion table,
 * for any model that maps a batch to logits [N, classes] (a {@link Network}, a {@link SimulatedNetwork}, an
 * {@link IntegerNetwork}: {@code Evaluation.of(net::forward, data)}). Immutable.
 *
 * <p>Prediction: the index of the largest logit, the first one on ties. Loss: the mean over samples of
 * {@code -log softmax(z)[label]} (natural logarithm, computed as {@code log-sum-exp(z) - z[label]}).
 */
public final class Evaluation {
    private final int[] labels;
    private final int[] predictions;
    private final double loss;
    private final int classes;

    private Evaluation(int[] labels, int[] predictions, double loss, int classes) {
        this.labels = labels;
        this.predictions = predictions;
        this.loss = loss;
        this.classes = classes;
    }

    /** The float network {@code net} on {@code data}. */
    public static Evaluation of(Network net, Dataset data) {
        return of(net::forward, data);
    }

    /** {@code model} (inputs [N, ...] to logits [N, classes]) on {@code data}. */
    public static Evaluation of(Function<Tensor, Tensor> model, Dataset data) {
        Objects.requireNonNull(model, "model");
        return ofLogits(model.apply(data.inputs()), data.labels());
    }

    /**
     * From logits [N, classes] and labels (one per row).
     *
     * @throws IllegalArgumentException if the shapes do not fit or a label is not below the number of classes
     */
    public static Evaluation ofLogits(Tensor logits, int[] labels) {
        if (logits.rank() != 2 || logits.dim(0) != labels.length) {
            throw new IllegalArgumentException("logits shaped " + Arrays.toString(logits.shape()) + " do not fit "
                    + labels.length + " labels (expected [" + labels.length + ", classes])");
        }
        int n = labels.length;
        int k = logits.dim(1);
        float[] z = TensorAccess.data(logits);
        double sum = 0;
        for (int s = 0; s < n; s++) {
            int y = labels[s];
            if (y < 0 || y >= k) {
                throw new IllegalArgumentException("label " + y + " of sample " + s + " is not among the " + k
                        + " classes the model outputs");
            }
            double max = Double.NEGATIVE_INFINITY;
            for (int c = 0; c < k; c++) {
                max = Math.max(max, z[s * k + c]);
            }
            double e = 0;
            for (int c = 0; c < k; c++) {
                e += Math.exp(z[s * k + c] - max);
            }
            sum += max + Math.log(e) - z[s * k + y];
        }
        return new Evaluation(labels.clone(), argmax(logits), n == 0 ? Double.NaN : sum / n, k);
    }

    /** Row-wise index of the largest value of [N, k] (the first on ties). */
    static int[] argmax(Tensor logits) {
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

    /** The share of samples predicted right (NaN for no sample). */
    public double accuracy() {
        int hits = 0;
        for (int i = 0; i < labels.length; i++) {
            hits += predictions[i] == labels[i] ? 1 : 0;
        }
        return labels.length == 0 ? Double.NaN : hits / (double) labels.length;
    }

    /** The mean cross-entropy (natural log). */
    public double loss() {
        return loss;
    }

    /** The predicted class per sample. */
    public int[] predictions() {
        return predictions.clone();
    }

    /** The number of classes (the model's output width). */
    public int classCount() {
        return classes;
    }

    /** {@code matrix()[true][predicted]}: the number of samples of class {@code true} predicted as {@code predicted}. */
    public int[][] matrix() {
        int[][] m = new int[classes][classes];
        for (int i = 0; i < labels.length; i++) {
            m[labels[i]][predictions[i]]++;
        }
        return m;
    }

    /**
     * The confusion table: one row per true class, columns {@code class}, {@code predicted_0} ..
     * {@code predicted_(k-1)} (counts), {@code samples} (the row sum) and {@code recall} (the diagonal count over the
     * row sum; NaN for a class without samples).
     */
    public Table confusion() {
        int[][] m = matrix();
        IntColumn cls = IntColumn.create("class");
        IntColumn[] pred = new IntColumn[classes];
        for (int c = 0; c < classes; c++) {
            pred[c] = IntColumn.create("predicted_" + c);
        }
        IntColumn samples = IntColumn.create("samples");
        DoubleColumn recall = DoubleColumn.create("recall");
        for (int t = 0; t < classes; t++) {
            cls.append(t);
            int row = 0;
            for (int p = 0; p < classes; p++) {
                pred[p].append(m[t][p]);
                row += m[t][p];
            }
            samples.append(row);
            recall.append(row == 0 ? Double.NaN : m[t][t] / (double) row);
        }
        Table table = Table.create("confusion (rows: true class)", cls);
        table.addColumns(pred);
        table.addColumns(samples, recall);
        return table;
    }

    /**
     * Per-class scores: columns {@code class}, {@code samples}, {@code predicted} (how often the class was
     * predicted), {@code recall}, {@code precision} (diagonal over the column sum) and {@code f1} (their harmonic
     * mean); NaN where a denominator is 0.
     */
    public Table perClass() {
        int[][] m = matrix();
        IntColumn cls = IntColumn.create("class");
        IntColumn samples = IntColumn.create("samples");
        IntColumn predicted = IntColumn.create("predicted");
        DoubleColumn recall = DoubleColumn.create("recall");
        DoubleColumn precision = DoubleColumn.create("precision");
        DoubleColumn f1 = DoubleColumn.create("f1");
        for (int c = 0; c < classes; c++) {
            int row = 0;
            int col = 0;
            for (int j = 0; j < classes; j++) {
                row += m[c][j];
                col += m[j][c];
            }
            double r = row == 0 ? Double.NaN : m[c][c] / (double) row;
            double p = col == 0 ? Double.NaN : m[c][c] / (double) col;
            cls.append(c);
            samples.append(row);
            predicted.append(col);
            recall.append(r);
            precision.append(p);
            f1.append(r + p > 0 ? 2 * r * p / (r + p) : Double.NaN);
        }
        return Table.create("per-class scores", cls, samples, predicted, recall, precision, f1);
    }

    @Override
    public String toString() {
        return String.format(java.util.Locale.ROOT, "Evaluation %d samples, %d classes: accuracy %.4f, loss %.4f",
                labels.length, classes, accuracy(), loss);
    }
}
