package dev.rungbook.tensor;

import java.util.Objects;

/**
 * A read-only window on some elements of a {@link Tensor} (a channel, a group, or the whole tensor), read in place.
 *
 * <p>The window is {@code runs} runs of {@code runLength} elements; run r starts at {@code offset + r * runStride}
 * in the tensor's row-major array, and elements within a run are {@code elementStride} apart. Element {@code j} of the
 * view is element {@code j % runLength} of run {@code j / runLength}.
 */
public final class TensorView {
    private final Tensor tensor;
    private final int index;
    private final String description;
    private final int offset;
    private final int runs;
    private final int runStride;
    private final int runLength;
    private final int elementStride;

    TensorView(Tensor tensor, int index, String description, int offset, int runs, int runStride, int runLength,
            int elementStride) {
        this.tensor = tensor;
        this.index = index;
        this.description = description;
        this.offset = offset;
        this.runs = runs;
        this.runStride = runStride;
        this.runLength = runLength;
        this.elementStride = elementStride;
    }

    /** The tensor this view reads. */
    public Tensor tensor() {
        return tensor;
    }

    /** The channel or group number within its tensor (0 for the whole tensor). */
    public int index() {
        return index;
    }

    /** The number of elements in the view. */
    public int size() {
        return runs * runLength;
    }

    /** True when the elements are one contiguous stretch of the tensor's array. */
    public boolean isContiguous() {
        return (runs <= 1 || runStride == runLength) && (runLength <= 1 || elementStride == 1);
    }

    /** Element {@code j} of the view. */
    public float get(int j) {
        Objects.checkIndex(j, size());
        return tensor.backing()[flatIndex(j)];
    }

    /** The row-major index in the tensor of element {@code j} of the view. */
    public int flatIndex(int j) {
        return offset + (j / runLength) * runStride + (j % runLength) * elementStride;
    }

    /** Copies the view's elements into {@code dst} starting at {@code at}; returns {@code dst}. */
    public float[] copyTo(float[] dst, int at) {
        float[] src = tensor.backing();
        int p = at;
        for (int r = 0; r < runs; r++) {
            int base = offset + r * runStride;
            if (elementStride == 1) {
                System.arraycopy(src, base, dst, p, runLength);
                p += runLength;
            } else {
                for (int k = 0; k < runLength; k++) {
                    dst[p++] = src[base + k * elementStride];
                }
            }
        }
        return dst;
    }

    /** The view's elements as a new array. */
    public float[] toFloatArray() {
        return copyTo(new float[size()], 0);
    }

    /** For example {@code channel 3 of axis 0 of tensor 'fc1.weight'}. */
    @Override
    public String toString() {
        return description + " of " + tensor.label();
    }
}
