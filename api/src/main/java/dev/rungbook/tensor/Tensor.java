package dev.rungbook.tensor;

import dev.rungbook.internal.TensorAccess;
import java.util.AbstractList;
import java.util.Arrays;
import java.util.List;
import java.util.Objects;
import java.util.function.Supplier;

/**
 * An immutable n-dimensional array of float32 values in row-major (C) order, with a shape, the {@link DType} it came
 * from, and an optional name (the checkpoint key it was read under).
 *
 * <p>Rungbook computes in float32 whatever the origin: integer and narrower float data are converted exactly on load,
 * float64 is rounded to nearest. A tensor holds at most {@value #MAX_ELEMENTS} elements (one Java array); larger
 * shapes are refused with an {@link IllegalArgumentException} naming the tensor and its shape, never truncated.
 *
 * <p>A tensor can be <em>lazy</em>: its shape and dtype are known at once, and its values are read from their source
 * (for example a memory-mapped checkpoint) only when first used, then kept. {@link #isLoaded()} tells which.
 *
 * <p>Views ({@link #channel}, {@link #channels}, {@link #groups}) read the tensor's values in place, without copying.
 */
public final class Tensor {
    /** The largest element count a tensor may hold: the largest safe Java array length. */
    public static final int MAX_ELEMENTS = Integer.MAX_VALUE - 8;

    static {
        TensorAccess.install(new TensorAccess.Accessor() {
            @Override
            public float[] data(Tensor t) {
                return t.data();
            }

            @Override
            public Tensor wrap(float[] data, int[] shape, DType dtype, String name) {
                Tensor t = new Tensor(shape.clone(), dtype, name, null, data);
                if (data.length != t.size) {
                    throw new IllegalArgumentException(t.label() + ": " + data.length
                            + " values do not fill shape " + Arrays.toString(shape));
                }
                return t;
            }
        });
    }

    private final int[] shape;
    private final int size;
    private final DType dtype;
    private final String name;
    private final Supplier<float[]> loader;
    private volatile float[] data;

    private Tensor(int[] shape, DType dtype, String name, Supplier<float[]> loader, float[] data) {
        this.name = name;
        this.size = checkedSize(name, shape);
        this.shape = shape;
        this.dtype = Objects.requireNonNull(dtype, "dtype");
        this.loader = loader;
        this.data = data;
    }

    /**
     * A float32 tensor holding a copy of {@code data} with the given shape.
     *
     * @throws IllegalArgumentException if a dimension is negative, the shape holds more than {@link #MAX_ELEMENTS}
     *     elements, or {@code data.length} differs from the product of the shape
     */
    public static Tensor of(float[] data, int... shape) {
        return TensorAccess.wrap(data.clone(), shape, DType.F32, null);
    }

    /**
     * A lazy tensor: {@code loader} is called once, on first use of the values, and must return exactly
     * {@code product(shape)} values (which the tensor then owns).
     */
    public static Tensor lazy(String name, DType dtype, int[] shape, Supplier<float[]> loader) {
        return new Tensor(shape.clone(), dtype, name, Objects.requireNonNull(loader, "loader"), null);
    }

    /** A tensor of the given shape whose element at flat index i is {@code f.value(i)}. */
    public static Tensor generate(IndexFunction f, int... shape) {
        int n = checkedSize(null, shape);
        float[] d = new float[n];
        for (int i = 0; i < n; i++) {
            d[i] = f.value(i);
        }
        return TensorAccess.wrap(d, shape, DType.F32, null);
    }

    /** Computes a value from a flat row-major index; used by {@link #generate}. */
    @FunctionalInterface
    public interface IndexFunction {
        /** The value at flat index {@code i}. */
        float value(int i);
    }

    private static int checkedSize(String name, int[] shape) {
        Objects.requireNonNull(shape, "shape");
        long n = 1;
        for (int d : shape) {
            if (d < 0) {
                throw new IllegalArgumentException(labelOf(name) + ": negative dimension in shape "
                        + Arrays.toString(shape));
            }
            n *= d;
            if (n > MAX_ELEMENTS) {
                throw new IllegalArgumentException(labelOf(name) + ": shape " + Arrays.toString(shape)
                        + " holds more than " + MAX_ELEMENTS + " elements, the most one tensor can hold");
            }
        }
        return (int) n;
    }

    private static String labelOf(String name) {
        return name == null ? "tensor" : "tensor '" + name + "'";
    }

    private float[] data() {
        float[] d = data;
        if (d == null) {
            synchronized (this) {
                d = data;
                if (d == null) {
                    d = loader.get();
                    if (d == null || d.length != size) {
                        throw new IllegalStateException(label() + ": loader returned "
                                + (d == null ? "null" : d.length + " values") + " for shape "
                                + Arrays.toString(shape));
                    }
                    data = d;
                }
            }
        }
        return d;
    }

    /** The shape (a copy). A scalar has shape {@code []}. */
    public int[] shape() {
        return shape.clone();
    }

    /** The number of dimensions. */
    public int rank() {
        return shape.length;
    }

    /** The length of dimension {@code axis}. */
    public int dim(int axis) {
        return shape[checkAxis(axis)];
    }

    /** The number of elements (the product of the shape). */
    public int size() {
        return size;
    }

    /** The element type the values came from (or are to be written as). */
    public DType dtype() {
        return dtype;
    }

    /** The name (a checkpoint key), or {@code null} when the tensor has none. */
    public String name() {
        return name;
    }

    /** The name for messages: {@code tensor 'fc1.weight'}, or {@code tensor} when unnamed. */
    public String label() {
        return labelOf(name);
    }

    /** True once the values are in memory (always for tensors that are not lazy). */
    public boolean isLoaded() {
        return data != null;
    }

    /** The same values under another name (no copy). */
    public Tensor withName(String newName) {
        return new Tensor(shape, dtype, newName, loader, data);
    }

    /**
     * The same values tagged with another dtype (no copy, no rounding). Writers use the tag as the target type: a
     * float32 tensor tagged {@link DType#BF16} is written as bfloat16, rounding to nearest even.
     */
    public Tensor withDType(DType newType) {
        return new Tensor(shape, newType, name, loader, data);
    }

    /** The same values with another shape of the same size (no copy). */
    public Tensor reshape(int... newShape) {
        int n = checkedSize(name, newShape);
        if (n != size) {
            throw new IllegalArgumentException(label() + ": cannot reshape " + Arrays.toString(shape) + " ("
                    + size + " elements) to " + Arrays.toString(newShape) + " (" + n + " elements)");
        }
        return new Tensor(newShape.clone(), dtype, name, loader, data);
    }

    /** The element at flat row-major index {@code i}. */
    public float getFlat(int i) {
        Objects.checkIndex(i, size);
        return data()[i];
    }

    /** The element at the given multi-index. */
    public float get(int... index) {
        if (index.length != shape.length) {
            throw new IllegalArgumentException(label() + ": index of rank " + index.length + " for shape "
                    + Arrays.toString(shape));
        }
        int flat = 0;
        for (int k = 0; k < shape.length; k++) {
            flat = flat * shape[k] + Objects.checkIndex(index[k], shape[k]);
        }
        return data()[flat];
    }

    /** A copy of all values in row-major order. */
    public float[] toFloatArray() {
        return data().clone();
    }

    private int checkAxis(int axis) {
        if (axis < 0 || axis >= shape.length) {
            throw new IllegalArgumentException(label() + ": axis " + axis + " is out of range for shape "
                    + Arrays.toString(shape));
        }
        return axis;
    }

    private int inner(int axis) {
        int inner = 1;
        for (int k = axis + 1; k < shape.length; k++) {
            inner *= shape[k];
        }
        return inner;
    }

    /** Channel {@code i} of {@code axis}: every element whose index along {@code axis} is {@code i}. No copy. */
    public TensorView channel(int axis, int i) {
        checkAxis(axis);
        Objects.checkIndex(i, shape[axis]);
        int inner = inner(axis);
        int outer = 1;
        for (int k = 0; k < axis; k++) {
            outer *= shape[k];
        }
        return new TensorView(this, i, "channel " + i + " of axis " + axis, i * inner, outer,
                shape[axis] * inner, inner, 1);
    }

    /** All channels of {@code axis}, in order. No copy. */
    public List<TensorView> channels(int axis) {
        checkAxis(axis);
        int n = shape[axis];
        return new AbstractList<>() {
            @Override
            public TensorView get(int i) {
                return channel(axis, i);
            }

            @Override
            public int size() {
                return n;
            }
        };
    }

    /**
     * The groups of {@code groupSize} consecutive elements along {@code axis} (for a weight shaped out x in and axis 1,
     * runs of {@code groupSize} input weights within each output row), numbered in row-major order of the remaining
     * indices with the group index in place of {@code axis}. No copy.
     *
     * @throws IllegalArgumentException if {@code groupSize} is not positive or does not divide the axis length
     */
    public List<TensorView> groups(int axis, int groupSize) {
        checkAxis(axis);
        if (groupSize <= 0 || shape[axis] % groupSize != 0) {
            throw new IllegalArgumentException(label() + ": group size " + groupSize + " does not divide dimension "
                    + axis + " of shape " + Arrays.toString(shape));
        }
        int inner = inner(axis);
        int perAxis = shape[axis] / groupSize;
        int count = perAxis == 0 || inner == 0 ? 0 : size / groupSize;
        int axisStride = shape[axis] * inner;
        return new AbstractList<>() {
            @Override
            public TensorView get(int g) {
                Objects.checkIndex(g, count);
                int i = g % inner;
                int rest = g / inner;
                int j = rest % perAxis;
                int o = rest / perAxis;
                int offset = o * axisStride + j * groupSize * inner + i;
                return new TensorView(Tensor.this, g, "group " + g + " (size " + groupSize + " along axis " + axis
                        + ")", offset, 1, 0, groupSize, inner);
            }

            @Override
            public int size() {
                return count;
            }
        };
    }

    /** The whole tensor as one view. */
    public TensorView all() {
        return new TensorView(this, 0, "whole tensor", 0, 1, 0, size, 1);
    }

    float[] backing() {
        return data();
    }

    /** Value equality: same shape, same dtype tag and bit-identical values (names are ignored). */
    @Override
    public boolean equals(Object o) {
        if (this == o) {
            return true;
        }
        if (!(o instanceof Tensor)) {
            return false;
        }
        Tensor t = (Tensor) o;
        return dtype == t.dtype && Arrays.equals(shape, t.shape) && Arrays.equals(data(), t.data());
    }

    @Override
    public int hashCode() {
        return 31 * Arrays.hashCode(shape) + Arrays.hashCode(data());
    }

    /** For example {@code Tensor 'fc1.weight' [256, 64] F32}. */
    @Override
    public String toString() {
        return "Tensor" + (name == null ? "" : " '" + name + "'") + " " + Arrays.toString(shape) + " " + dtype
                + (isLoaded() ? "" : " (not loaded)");
    }
}
