package dev.rungbook.round;

import java.util.Arrays;

/**
 * The integer grid each element of a tensor sits on: the code range {@code [qmin, qmax]} and, per channel or group,
 * a scale {@code s} and zero point {@code z}, so that code {@code q} stands for {@code s * (q - z)}. Handed to a
 * {@link LayerRounding} by the quantizer, after the range rule has fixed the scales.
 *
 * <p>Segments (the channels or groups that share a scale) are numbered as {@link dev.rungbook.tensor.Tensor#channel}
 * and {@link dev.rungbook.tensor.Tensor#groups} number them: per tensor there is one segment; per channel of
 * {@code axis}, segment {@code c} is index {@code c} along the axis; per group along {@code axis}, segments run in
 * row-major order of the remaining indices with the group number in place of {@code axis}.
 *
 * <p>Immutable: the arrays given to {@link #of} are copied.
 */
public final class GridAssignment {
    private final int[] shape;
    private final int axis;
    private final int groupSize;
    private final int qmin;
    private final int qmax;
    private final float[] scales;
    private final float[] zeroPoints;
    private final int dim;
    private final int inner;

    private GridAssignment(int[] shape, int axis, int groupSize, int qmin, int qmax, float[] scales,
            float[] zeroPoints) {
        this.shape = shape;
        this.axis = axis;
        this.groupSize = groupSize;
        this.qmin = qmin;
        this.qmax = qmax;
        this.scales = scales;
        this.zeroPoints = zeroPoints;
        if (axis >= 0) {
            int in = 1;
            for (int k = axis + 1; k < shape.length; k++) {
                in *= shape[k];
            }
            this.inner = in;
            this.dim = shape[axis];
        } else {
            this.inner = 1;
            this.dim = 1;
        }
    }

    /**
     * A grid assignment.
     *
     * @param shape the tensor's shape
     * @param axis the channel or group axis, or -1 for one scale for the whole tensor
     * @param groupSize 0 for one scale per channel of {@code axis}, else the length of the groups along {@code axis}
     * @param qmin the smallest code
     * @param qmax the largest code
     * @param scales one positive finite scale per segment
     * @param zeroPoints one zero point per segment
     * @throws IllegalArgumentException if the pieces do not fit together (each problem named with its values)
     */
    public static GridAssignment of(int[] shape, int axis, int groupSize, int qmin, int qmax, float[] scales,
            float[] zeroPoints) {
        int[] sh = shape.clone();
        if (axis < -1 || axis >= sh.length) {
            throw new IllegalArgumentException("axis " + axis + " is out of range for shape " + Arrays.toString(sh));
        }
        if (groupSize < 0 || axis < 0 && groupSize != 0 || groupSize > 0 && sh[axis] % groupSize != 0) {
            throw new IllegalArgumentException("group size " + groupSize + " does not fit axis " + axis
                    + " of shape " + Arrays.toString(sh));
        }
        if (qmin >= qmax) {
            throw new IllegalArgumentException("code range [" + qmin + ", " + qmax + "] is empty");
        }
        GridAssignment g = new GridAssignment(sh, axis, groupSize, qmin, qmax, scales.clone(), zeroPoints.clone());
        int n = g.segmentCount();
        if (scales.length != n || zeroPoints.length != n) {
            throw new IllegalArgumentException(n + " segments need " + n + " scales and zero points, got "
                    + scales.length + " and " + zeroPoints.length);
        }
        for (int s = 0; s < n; s++) {
            if (!(scales[s] > 0) || !Float.isFinite(scales[s]) || !Float.isFinite(zeroPoints[s])) {
                throw new IllegalArgumentException("segment " + s + ": scale " + scales[s] + " and zero point "
                        + zeroPoints[s] + " must be finite with a positive scale");
            }
        }
        return g;
    }

    /** The tensor shape (a copy). */
    public int[] shape() {
        return shape.clone();
    }

    /** The channel or group axis, or -1 when one scale covers the whole tensor. */
    public int axis() {
        return axis;
    }

    /** The group length along {@link #axis()}, or 0 for whole channels (or the whole tensor). */
    public int groupSize() {
        return groupSize;
    }

    /** The smallest code. */
    public int qmin() {
        return qmin;
    }

    /** The largest code. */
    public int qmax() {
        return qmax;
    }

    /** The number of segments (scales). */
    public int segmentCount() {
        if (axis < 0) {
            return 1;
        }
        int total = 1;
        for (int d : shape) {
            total *= d;
        }
        if (dim == 0) {
            return 0;
        }
        return groupSize == 0 ? dim : total / groupSize;
    }

    /** The segment (scale index) of the element at flat row-major index {@code flat}. */
    public int segmentOf(int flat) {
        if (axis < 0) {
            return 0;
        }
        int c = (flat / inner) % dim;
        if (groupSize == 0) {
            return c;
        }
        int o = flat / (dim * inner);
        return (o * (dim / groupSize) + c / groupSize) * inner + flat % inner;
    }

    /** The scales, one per segment (a copy). */
    public float[] scales() {
        return scales.clone();
    }

    /** The zero points, one per segment (a copy). */
    public float[] zeroPoints() {
        return zeroPoints.clone();
    }

    /** The scale of segment {@code segment}. */
    public float scale(int segment) {
        return scales[segment];
    }

    /** The zero point of segment {@code segment}. */
    public float zeroPoint(int segment) {
        return zeroPoints[segment];
    }

    /** {@code x / s + z} for the element at {@code flat}: the value a rounding rule turns into a code. */
    public double scaled(int flat, double x) {
        int s = segmentOf(flat);
        return x / scales[s] + zeroPoints[s];
    }

    /** The value that code {@code code} stands for at element {@code flat}: {@code s * (code - z)}. */
    public double value(int flat, int code) {
        int s = segmentOf(flat);
        return scales[s] * (code - (double) zeroPoints[s]);
    }

    /** The nearest code (ties to even, clamped) for value {@code x} at element {@code flat}. */
    public int nearestCode(int flat, double x) {
        double r = Math.rint(scaled(flat, x));
        return (int) Math.max(qmin, Math.min(qmax, r));
    }

    @Override
    public String toString() {
        return "GridAssignment " + Arrays.toString(shape) + " axis " + axis + " group " + groupSize + " codes ["
                + qmin + ", " + qmax + "], " + scales.length + " scales";
    }
}
