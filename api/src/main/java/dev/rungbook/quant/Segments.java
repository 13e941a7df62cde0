package dev.rungbook.quant;

/**
 * The geometry of the segments (elements that share one scale) of a tensor: segment {@code s} is {@code runs} runs
 * of {@code runLength} elements, run {@code r} starting at {@code offset(s) + r * runStride}, elements
 * {@code elementStride} apart. Numbering as {@link dev.rungbook.tensor.Tensor#channel} and
 * {@link dev.rungbook.tensor.Tensor#groups}. Package-private.
 */
final class Segments {
    final int count;
    final int size;
    final int runs;
    final int runStride;
    final int runLength;
    final int elementStride;
    /** -1 per tensor, else the resolved axis. */
    final int axis;
    /** 0 per channel or per tensor. */
    final int groupSize;
    private final int inner;
    private final int dim;
    private final int[] segmentShape;

    Segments(int[] shape, Granularity g, int resolvedAxis) {
        int n = 1;
        for (int d : shape) {
            n *= d;
        }
        if (g.kind() == Granularity.Kind.TENSOR) {
            axis = -1;
            groupSize = 0;
            inner = 1;
            dim = 1;
            count = 1;
            size = n;
            runs = 1;
            runStride = 0;
            runLength = n;
            elementStride = 1;
            segmentShape = new int[] {1};
            return;
        }
        axis = resolvedAxis;
        int in = 1;
        for (int k = axis + 1; k < shape.length; k++) {
            in *= shape[k];
        }
        inner = in;
        dim = shape[axis];
        if (g.kind() == Granularity.Kind.CHANNEL) {
            groupSize = 0;
            count = dim;
            size = dim == 0 ? 0 : n / dim;
            runs = size == 0 ? 0 : n / (dim * inner);
            runStride = dim * inner;
            runLength = inner;
            elementStride = 1;
            segmentShape = new int[] {dim};
        } else {
            groupSize = g.groupSize();
            count = n / groupSize;
            size = groupSize;
            runs = 1;
            runStride = 0;
            runLength = groupSize;
            elementStride = inner;
            int[] sh = shape.clone();
            sh[axis] = dim / groupSize;
            segmentShape = sh;
        }
    }

    /** The shape of the scale tensor: [1] per tensor, [dim] per channel, the tensor shape with axis/groupSize. */
    int[] scaleShape() {
        return segmentShape.clone();
    }

    int offset(int s) {
        if (axis < 0) {
            return 0;
        }
        if (groupSize == 0) {
            return s * inner;
        }
        int i = s % inner;
        int rest = s / inner;
        int perAxis = dim / groupSize;
        int j = rest % perAxis;
        int o = rest / perAxis;
        return o * dim * inner + j * groupSize * inner + i;
    }

    int flatIndex(int s, int j) {
        return offset(s) + (j / runLength) * runStride + (j % runLength) * elementStride;
    }

    boolean contiguous() {
        return (runs <= 1 || runStride == runLength) && (runLength <= 1 || elementStride == 1);
    }

    /** Copies segment {@code s} of {@code src} into {@code dst[0, size)}. */
    void gather(float[] src, int s, float[] dst) {
        int base = offset(s);
        int p = 0;
        for (int r = 0; r < runs; r++) {
            int b = base + r * runStride;
            if (elementStride == 1) {
                System.arraycopy(src, b, dst, p, runLength);
                p += runLength;
            } else {
                for (int k = 0; k < runLength; k++) {
                    dst[p++] = src[b + k * elementStride];
                }
            }
        }
    }

    /** Writes {@code src[0, size)} into segment {@code s} of {@code dst}. */
    void scatter(float[] src, int s, float[] dst) {
        int base = offset(s);
        int p = 0;
        for (int r = 0; r < runs; r++) {
            int b = base + r * runStride;
            if (elementStride == 1) {
                System.arraycopy(src, p, dst, b, runLength);
                p += runLength;
            } else {
                for (int k = 0; k < runLength; k++) {
                    dst[b + k * elementStride] = src[p++];
                }
            }
        }
    }

    /** Writes {@code codes[0, size)} into segment {@code s} of {@code out}. */
    void scatterCodes(int[] codes, int s, Codes out) {
        int base = offset(s);
        int p = 0;
        for (int r = 0; r < runs; r++) {
            int b = base + r * runStride;
            for (int k = 0; k < runLength; k++) {
                out.set(b + k * elementStride, codes[p++]);
            }
        }
    }
}
