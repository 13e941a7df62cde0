package dev.rungbook.internal;

import dev.rungbook.tensor.Tensor;
import java.util.Objects;

/**
 * Gives Rungbook's own kernels read access to a tensor's backing array without a copy. Internal: the array must not
 * be modified, since tensors are immutable values.
 */
public final class TensorAccess {
    /** Implemented by {@link Tensor}; installed once when the class initialises. */
    public interface Accessor {
        /** The backing row-major array of {@code t} (loading it first if the tensor is lazy). */
        float[] data(Tensor t);

        /** Wraps {@code data} as a tensor without copying; the caller hands over ownership of the array. */
        Tensor wrap(float[] data, int[] shape, dev.rungbook.tensor.DType dtype, String name);
    }

    private static volatile Accessor accessor;

    private TensorAccess() {
    }

    /** Called by {@link Tensor}'s static initialiser. */
    public static void install(Accessor a) {
        if (accessor != null) {
            throw new IllegalStateException("tensor accessor already installed");
        }
        accessor = Objects.requireNonNull(a);
    }

    private static Accessor accessor() {
        Accessor a = accessor;
        if (a == null) {
            // Initialising Tensor installs the accessor.
            Tensor.of(new float[] {0f}, 1);
            a = accessor;
        }
        return a;
    }

    /** The backing array of {@code t}; never modify it. */
    public static float[] data(Tensor t) {
        return accessor().data(t);
    }

    /** A tensor that owns {@code data} (no copy). */
    public static Tensor wrap(float[] data, int[] shape, dev.rungbook.tensor.DType dtype, String name) {
        return accessor().wrap(data, shape, dtype, name);
    }
}
