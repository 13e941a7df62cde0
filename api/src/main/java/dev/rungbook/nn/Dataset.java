package dev.rungbook.nn;

import dev.rungbook.io.Checkpoint;
import dev.rungbook.tensor.Tensor;
import java.nio.file.Path;
import java.util.Arrays;

/**
 * Inputs shaped {@code [N, ...]} with one integer class label per sample.
 *
 * @param inputs the samples, first axis is the sample index
 * @param labels class labels, {@code labels.length == inputs.dim(0)}
 */
public record Dataset(Tensor inputs, int[] labels) {
    /** Checks that there is one label per sample and that labels are not negative. */
    public Dataset {
        if (inputs.rank() < 1 || inputs.dim(0) != labels.length) {
            throw new IllegalArgumentException("dataset: " + labels.length + " labels for inputs shaped "
                    + Arrays.toString(inputs.shape()));
        }
        labels = labels.clone();
        for (int i = 0; i < labels.length; i++) {
            if (labels[i] < 0) {
                throw new IllegalArgumentException("dataset: label " + labels[i] + " at sample " + i
                        + " is negative");
            }
        }
    }

    /**
     * Loads a dataset from a checkpoint file (for example an {@code .npz}) holding tensors {@code inputs} and
     * {@code labels} (labels stored as integers or integral floats).
     */
    public static Dataset load(Path file) {
        try (Checkpoint c = Checkpoint.open(file)) {
            Tensor x = c.tensor("inputs");
            Tensor y = c.tensor("labels");
            float[] xv = x.toFloatArray();
            float[] yv = y.toFloatArray();
            int[] labels = new int[yv.length];
            for (int i = 0; i < yv.length; i++) {
                if (yv[i] != Math.rint(yv[i])) {
                    throw new IllegalArgumentException(file + ": tensor 'labels': value " + yv[i] + " at index " + i
                            + " is not an integer");
                }
                labels[i] = (int) yv[i];
            }
            return new Dataset(Tensor.of(xv, x.shape()).withName("inputs"), labels);
        }
    }

    /** The number of samples. */
    public int size() {
        return labels.length;
    }

    /** The number of classes: one more than the largest label. */
    public int classCount() {
        int max = -1;
        for (int l : labels) {
            max = Math.max(max, l);
        }
        return max + 1;
    }

    @Override
    public int[] labels() {
        return labels.clone();
    }

    @Override
    public boolean equals(Object o) {
        return o instanceof Dataset && ((Dataset) o).inputs.equals(inputs)
                && Arrays.equals(((Dataset) o).labels, labels);
    }

    @Override
    public int hashCode() {
        return 31 * inputs.hashCode() + Arrays.hashCode(labels);
    }

    @Override
    public String toString() {
        return "Dataset " + labels.length + " samples, inputs " + Arrays.toString(inputs.shape()) + ", "
                + classCount() + " classes";
    }
}
