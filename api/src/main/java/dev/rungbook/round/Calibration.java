package dev.rungbook.round;

import dev.rungbook.internal.TensorAccess;
import dev.rungbook.io.Checkpoint;
import dev.rungbook.tensor.Tensor;
import java.nio.file.Path;
import java.util.Arrays;
import java.util.Objects;
import java.util.Optional;

/**
 * Calibration inputs of one linear layer for learned rounding: {@code N} input samples of the layer, shaped
 * {@code N x in} (one sample per row), optionally with the layer's bias and the activation that follows it, so that
 * the rounding objective can be taken on the layer's output before or after the activation.
 *
 * <p>For a weight {@code W} shaped {@code out x in}, sample {@code x} (a row) gives the pre-activation output
 * {@code W x + b}; {@link Rounding adaptive rounding} compares {@code f(W x + b)} with {@code f(W~ x + b)}, where
 * {@code f} is the activation (identity by default). Error-feedback rounding uses the inputs only (its objective is
 * the pre-activation error, on which the bias has no effect).
 *
 * <p>Immutable; the tensors are held, not copied (tensors are immutable values). Non-finite inputs are refused.
 *
 * <pre>{@code
 * Calibration cal = Calibration.load(Path.of("fc1-inputs.npy"), "fc1-inputs")
 *         .withBias(ckpt.tensor("fc1.bias"))
 *         .followedBy(Calibration.Activation.RELU);
 * }</pre>
 */
public final class Calibration {
    /** The activation that follows the layer, applied to both outputs before they are compared. */
    public enum Activation {
        /** No activation: the objective is the pre-activation output error. The default. */
        IDENTITY,
        /** {@code max(0, y)}. */
        RELU,
        /** {@code min(max(0, y), 6)}. */
        RELU6;

        /** The activation of {@code y}. */
        public double apply(double y) {
            switch (this) {
                case RELU:
                    return Math.max(0.0, y);
                case RELU6:
                    return Math.min(Math.max(0.0, y), 6.0);
                default:
                    return y;
            }
        }

        /**
         * The derivative of {@link #apply} at {@code y}: 1 where the activation passes {@code y} through, 0 where it
         * is flat (at the kinks, 0 for ReLU at 0 and for ReLU6 at 0 and 6).
         */
        public double slope(double y) {
            switch (this) {
                case RELU:
                    return y > 0 ? 1 : 0;
                case RELU6:
                    return y > 0 && y < 6 ? 1 : 0;
                default:
                    return 1;
            }
        }
    }

    private final Tensor inputs;
    private final Tensor bias;
    private final Activation activation;

    private Calibration(Tensor inputs, Tensor bias, Activation activation) {
        this.inputs = inputs;
        this.bias = bias;
        this.activation = activation;
    }

    /**
     * Calibration inputs shaped {@code N x in}, one sample per row.
     *
     * @throws IllegalArgumentException if the tensor is not two-dimensional, holds no sample, or holds a NaN or
     *     infinite value (the message names the tensor and the position)
     */
    public static Calibration of(Tensor inputs) {
        Objects.requireNonNull(inputs, "inputs");
        int[] s = inputs.shape();
        if (s.length != 2) {
            throw new IllegalArgumentException(inputs.label() + ": calibration inputs must be shaped [samples, "
                    + "features], got shape " + Arrays.toString(s));
        }
        if (s[0] == 0 || s[1] == 0) {
            throw new IllegalArgumentException(inputs.label() + ": calibration inputs of shape " + Arrays.toString(s)
                    + " hold no sample");
        }
        float[] d = TensorAccess.data(inputs);
        for (int i = 0; i < d.length; i++) {
            if (!Float.isFinite(d[i])) {
                throw new IllegalArgumentException(inputs.label() + ": calibration input " + d[i] + " at [" + i / s[1]
                        + ", " + i % s[1] + "]; inputs must be finite");
            }
        }
        return new Calibration(inputs, null, Activation.IDENTITY);
    }

    /**
     * Reads the inputs from tensor {@code tensorName} of a checkpoint file (any format {@link Checkpoint#open}
     * reads, e.g. an {@code .npy} of captured activations; for an {@code .npy} file the tensor name is the file
     * name without extension). The values are read now, and the file is closed.
     *
     * @throws IllegalArgumentException if there is no such tensor or it is not a valid calibration set
     * @throws java.io.UncheckedIOException if the file cannot be read
     */
    public static Calibration load(Path file, String tensorName) {
        Objects.requireNonNull(file, "file");
        Objects.requireNonNull(tensorName, "tensorName");
        try (Checkpoint ckpt = Checkpoint.open(file)) {
            Tensor t = ckpt.tensor(tensorName);
            float[] values = t.toFloatArray();
            Tensor loaded = TensorAccess.wrap(values, t.shape(), t.dtype(), tensorName);
            try {
                return of(loaded);
            } catch (IllegalArgumentException e) {
                throw new IllegalArgumentException(file + ": " + e.getMessage(), e);
            }
        }
    }

    /**
     * The same inputs with the layer's bias {@code b} (length {@code out}) added to both outputs. The bias matters
     * only when an activation follows; its length is checked against the weight when the rounding runs.
     *
     * @throws IllegalArgumentException if {@code bias} is not one-dimensional or not finite
     */
    public Calibration withBias(Tensor bias) {
        Objects.requireNonNull(bias, "bias");
        if (bias.rank() != 1) {
            throw new IllegalArgumentException(bias.label() + ": a bias must be one-dimensional, got shape "
                    + Arrays.toString(bias.shape()));
        }
        float[] d = TensorAccess.data(bias);
        for (int i = 0; i < d.length; i++) {
            if (!Float.isFinite(d[i])) {
                throw new IllegalArgumentException(bias.label() + ": bias value " + d[i] + " at [" + i
                        + "] is not finite");
            }
        }
        return new Calibration(inputs, bias, activation);
    }

    /** The same inputs with the activation that follows the layer (default {@link Activation#IDENTITY}). */
    public Calibration followedBy(Activation act) {
        return new Calibration(inputs, bias, Objects.requireNonNull(act, "activation"));
    }

    /** The input samples, shaped {@code N x in}. */
    public Tensor inputs() {
        return inputs;
    }

    /** The number of samples {@code N}. */
    public int samples() {
        return inputs.dim(0);
    }

    /** The number of input features {@code in}. */
    public int features() {
        return inputs.dim(1);
    }

    /** The bias, if one was given. */
    public Optional<Tensor> bias() {
        return Optional.ofNullable(bias);
    }

    /** The activation that follows the layer. */
    public Activation activation() {
        return activation;
    }

    /**
     * Checks that a weight fits these inputs: shaped {@code out x in} with {@code in == features()}, and a bias, if
     * any, of length {@code out}.
     *
     * @throws IllegalArgumentException naming both shapes, e.g. {@code weight [64, 72] vs inputs [512, 70]}
     */
    public void checkWeight(Tensor weight) {
        int[] ws = weight.shape();
        if (ws.length != 2) {
            throw new IllegalArgumentException(weight.label() + ": learned rounding needs a weight shaped [out, in],"
                    + " got shape " + Arrays.toString(ws));
        }
        if (ws[1] != features()) {
            throw new IllegalArgumentException(weight.label() + ": weight " + Arrays.toString(ws) + " vs inputs "
                    + Arrays.toString(inputs.shape()) + " (" + inputs.label() + "): the weight's "
                    + ws[1] + " input columns must match the " + features() + " input features");
        }
        if (bias != null && bias.size() != ws[0]) {
            throw new IllegalArgumentException(weight.label() + ": weight " + Arrays.toString(ws) + " vs bias "
                    + Arrays.toString(bias.shape()) + " (" + bias.label() + "): the bias needs one value per "
                    + "output row");
        }
    }

    /** A short description, e.g. {@code 512 samples x 70 features, bias, ReLU}. */
    public String label() {
        return samples() + " samples x " + features() + " features" + (bias != null ? ", bias" : "")
                + (activation == Activation.RELU ? ", ReLU" : "");
    }

    @Override
    public boolean equals(Object o) {
        if (!(o instanceof Calibration)) {
            return false;
        }
        Calibration c = (Calibration) o;
        return inputs.equals(c.inputs) && Objects.equals(bias, c.bias) && activation == c.activation;
    }

    @Override
    public int hashCode() {
        return Objects.hash(inputs, bias, activation);
    }

    @Override
    public String toString() {
        return "Calibration[" + label() + "]";
    }
}
