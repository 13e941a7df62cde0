package dev.rungbook.io;

/** Shape arithmetic and the Fortran-to-C reordering. */
final class Layout {
    private Layout() {
    }

    /** The element count of {@code shape}, or -1 if it overflows a long. Dimensions must be non-negative. */
    static long elementCount(long[] shape) {
        long n = 1;
        for (long d : shape) {
            if (d == 0) {
                return 0;
            }
        }
        for (long d : shape) {
            if (n > Long.MAX_VALUE / d) {
                return -1;
            }
            n *= d;
        }
        return n;
    }

    /** The byte size of {@code count} elements of {@code elementBytes} each, or -1 if it overflows a long. */
    static long byteCount(long count, int elementBytes) {
        return count < 0 || count > Long.MAX_VALUE / elementBytes ? -1 : count * elementBytes;
    }

    /** {@code [2, 3]} for messages. */
    static String shapeText(long[] shape) {
        return java.util.Arrays.toString(shape);
    }

    /**
     * Reorders {@code src}, the elements of {@code shape} in column-major (Fortran) order, into a new row-major array.
     * Column-major element (i0, ..., ik) sits at {@code i0 + d0 * (i1 + d1 * (i2 + ...))}.
     */
    static float[] fortranToC(float[] src, int[] shape) {
        int rank = shape.length;
        if (rank < 2 || src.length == 0) {
            return src;
        }
        float[] dst = new float[src.length];
        int[] stride = new int[rank]; // column-major strides
        int s = 1;
        for (int k = 0; k < rank; k++) {
            stride[k] = s;
            s *= shape[k];
        }
        int last = rank - 1;
        int inner = shape[last];
        int innerStride = stride[last];
        int[] idx = new int[rank];
        int srcBase = 0; // column-major offset of (idx[0], ..., idx[last-1], 0)
        for (int out = 0; out < dst.length; out += inner) {
            for (int j = 0, p = srcBase; j < inner; j++, p += innerStride) {
                dst[out + j] = src[p];
            }
            // advance the outer index (row-major odometer over axes 0..last-1)
            for (int k = last - 1; k >= 0; k--) {
                idx[k]++;
                srcBase += stride[k];
                if (idx[k] < shape[k]) {
                    break;
                }
                srcBase -= idx[k] * stride[k];
                idx[k] = 0;
            }
        }
        return dst;
    }
}
