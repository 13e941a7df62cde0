package dev.rungbook.range;

/** Exponential moving average of per-batch minima and maxima; batches are runs of slices along axis 0. */
final class RunningRule implements RangeRule {
    private final double momentum;
    private final int rowsPerBatch;

    RunningRule(double momentum, int rowsPerBatch) {
        if (!(momentum >= 0 && momentum < 1)) {
            throw new IllegalArgumentException("running range momentum must be in [0, 1), got " + momentum);
        }
        if (rowsPerBatch < 1) {
            throw new IllegalArgumentException("rows per batch must be at least 1, got " + rowsPerBatch);
        }
        this.momentum = momentum;
        this.rowsPerBatch = rowsPerBatch;
    }

    @Override
    public String label() {
        return "running(" + momentum + (rowsPerBatch == 1 ? "" : "," + rowsPerBatch) + ")";
    }

    @Override
    public Range range(float[] values, int from, int to, RangeContext ctx) {
        if (from == to) {
            return new Range(0, 0);
        }
        int[] shape = ctx.shape();
        long rowSize = 1;
        for (int k = 1; k < shape.length; k++) {
            rowSize *= shape[k];
        }
        long batchSpan = Math.max(1, rowSize * rowsPerBatch);
        // Elements of a segment come in increasing flat order, so each batch's elements are consecutive here.
        long batch = -1;
        double bLo = 0;
        double bHi = 0;
        double lo = 0;
        double hi = 0;
        boolean started = false;
        for (int j = 0; j < to - from; j++) {
            long b = ctx.flatIndex(j) / batchSpan;
            float x = values[from + j];
            if (b != batch) {
                if (batch >= 0) {
                    if (!started) {
                        lo = bLo;
                        hi = bHi;
                        started = true;
                    } else {
                        lo = momentum * lo + (1 - momentum) * bLo;
                        hi = momentum * hi + (1 - momentum) * bHi;
                    }
                }
                batch = b;
                bLo = x;
                bHi = x;
            } else {
                bLo = Math.min(bLo, x);
                bHi = Math.max(bHi, x);
            }
        }
        if (!started) {
            lo = bLo;
            hi = bHi;
        } else {
            lo = momentum * lo + (1 - momentum) * bLo;
            hi = momentum * hi + (1 - momentum) * bHi;
        }
        return new Range(Math.min(lo, hi), Math.max(lo, hi));
    }

    @Override
    public boolean equals(Object o) {
        return o instanceof RunningRule && ((RunningRule) o).momentum == momentum
                && ((RunningRule) o).rowsPerBatch == rowsPerBatch;
    }

    @Override
    public int hashCode() {
        return Double.hashCode(momentum) * 31 + rowsPerBatch;
    }

    @Override
    public String toString() {
        return label();
    }
}
