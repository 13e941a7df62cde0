package dev.rungbook.io;

import dev.rungbook.tensor.DType;
import java.util.Arrays;
import java.util.Objects;

/**
 * What a checkpoint says about one tensor, known without reading its values. The shape is kept as {@code long}s, so a
 * tensor too large to load (more than {@link dev.rungbook.tensor.Tensor#MAX_ELEMENTS} elements) can still be
 * described.
 */
public final class TensorInfo {
    private final String name;
    private final DType dtype;
    private final long[] shape;
    private final long elementCount;

    TensorInfo(String name, DType dtype, long[] shape, long elementCount) {
        this.name = Objects.requireNonNull(name);
        this.dtype = Objects.requireNonNull(dtype);
        this.shape = shape.clone();
        this.elementCount = elementCount;
    }

    /**
     * A description of a tensor to be written (see {@link StreamingWriter}).
     *
     * @throws IllegalArgumentException for a negative dimension
     * @throws ArithmeticException if the element or byte count overflows a {@code long}
     */
    public static TensorInfo of(String name, DType dtype, long... shape) {
        Objects.requireNonNull(name, "name");
        Objects.requireNonNull(dtype, "dtype");
        long count = 1;
        for (long d : shape) {
            if (d < 0) {
                throw new IllegalArgumentException("tensor '" + name + "': negative dimension in shape "
                        + Arrays.toString(shape));
            }
            count = Math.multiplyExact(count, d);
        }
        Math.multiplyExact(count, (long) dtype.byteSize());
        return new TensorInfo(name, dtype, shape, count);
    }

    /** The tensor's name in the checkpoint. */
    public String name() {
        return name;
    }

    /** The stored element type. */
    public DType dtype() {
        return dtype;
    }

    /** The shape, row-major (a copy). */
    public long[] shape() {
        return shape.clone();
    }

    /** The number of elements. */
    public long elementCount() {
        return elementCount;
    }

    /** The stored size in bytes. */
    public long byteSize() {
        return elementCount * dtype.byteSize();
    }

    /** True if {@link Checkpoint#tensor} can load it as one tensor. */
    public boolean fitsInTensor() {
        if (elementCount > dev.rungbook.tensor.Tensor.MAX_ELEMENTS) {
            return false;
        }
        for (long d : shape) {
            if (d > Integer.MAX_VALUE) {
                return false;
            }
        }
        return true;
    }

    @Override
    public boolean equals(Object o) {
        if (!(o instanceof TensorInfo)) {
            return false;
        }
        TensorInfo t = (TensorInfo) o;
        return name.equals(t.name) && dtype == t.dtype && Arrays.equals(shape, t.shape);
    }

    @Override
    public int hashCode() {
        return Objects.hash(name, dtype, Arrays.hashCode(shape));
    }

    /** For example {@code fc1.weight [256, 64] BF16}. */
    @Override
    public String toString() {
        return name + " " + Arrays.toString(shape) + " " + dtype;
    }
}
