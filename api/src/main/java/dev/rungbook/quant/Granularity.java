package dev.rungbook.quant;

import java.util.Objects;

/**
 * Which elements share one scale (and zero point): the whole tensor, each channel of an axis, or each group of
 * consecutive elements along an axis. Immutable value.
 *
 * <p>Axis {@code -1} stands for the last axis of whatever tensor the spec meets (the block formats' default); any
 * other axis must exist in the tensor, which is checked when the spec meets it.
 */
public final class Granularity {
    /** The three kinds of granularity. */
    public enum Kind {
        /** One scale for the whole tensor. */
        TENSOR,
        /** One scale per index along an axis. */
        CHANNEL,
        /** One scale per run of {@code groupSize} consecutive elements along an axis. */
        GROUP
    }

    private static final Granularity TENSOR = new Granularity(Kind.TENSOR, 0, 0);

    private final Kind kind;
    private final int axis;
    private final int groupSize;

    private Granularity(Kind kind, int axis, int groupSize) {
        this.kind = kind;
        this.axis = axis;
        this.groupSize = groupSize;
    }

    /** One scale for the whole tensor. */
    public static Granularity perTensor() {
        return TENSOR;
    }

    /** One scale per channel of {@code axis} (-1: the last axis). */
    public static Granularity perChannel(int axis) {
        if (axis < -1) {
            throw new IllegalArgumentException("channel axis must be -1 (last) or non-negative, got " + axis);
        }
        return new Granularity(Kind.CHANNEL, axis, 0);
    }

    /**
     * One scale per group of {@code size} consecutive elements along {@code axis} (-1: the last axis); for a weight
     * shaped out x in, {@code perGroup(1, 128)} gives each output row one scale per 128 inputs.
     */
    public static Granularity perGroup(int axis, int size) {
        if (axis < -1) {
            throw new IllegalArgumentException("group axis must be -1 (last) or non-negative, got " + axis);
        }
        if (size < 1) {
            throw new IllegalArgumentException("group size must be at least 1, got " + size);
        }
        return new Granularity(Kind.GROUP, axis, size);
    }

    /** The kind. */
    public Kind kind() {
        return kind;
    }

    /** The axis (-1 for the last axis); 0 for {@link Kind#TENSOR}. */
    public int axis() {
        return axis;
    }

    /** The group length, 0 unless {@link Kind#GROUP}. */
    public int groupSize() {
        return groupSize;
    }

    /** For example {@code per-tensor}, {@code per-channel(0)}, {@code per-group(1,128)}, {@code per-group(last,64)}. */
    public String label() {
        String ax = axis == -1 ? "last" : Integer.toString(axis);
        switch (kind) {
            case TENSOR:
                return "per-tensor";
            case CHANNEL:
                return "per-channel(" + ax + ")";
            default:
                return "per-group(" + ax + "," + groupSize + ")";
        }
    }

    @Override
    public boolean equals(Object o) {
        if (!(o instanceof Granularity)) {
            return false;
        }
        Granularity g = (Granularity) o;
        return kind == g.kind && axis == g.axis && groupSize == g.groupSize;
    }

    @Override
    public int hashCode() {
        return Objects.hash(kind, axis, groupSize);
    }

    @Override
    public String toString() {
        return label();
    }
}
