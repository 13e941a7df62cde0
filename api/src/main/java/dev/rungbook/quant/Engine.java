package dev.rungbook.quant;

import dev.rungbook.internal.Codebook1D;
import dev.rungbook.internal.Fused;
import dev.rungbook.internal.Lanes;
import dev.rungbook.internal.MxScale;
import dev.rungbook.internal.Nf4;
import dev.rungbook.internal.Scales;
import dev.rungbook.internal.SegmentKernels;
import dev.rungbook.internal.TensorAccess;
import dev.rungbook.progress.Progress;
import dev.rungbook.range.Range;
import dev.rungbook.range.RangeContext;
import dev.rungbook.round.ErrorFeedbackRounding;
import dev.rungbook.round.ElementRounding;
import dev.rungbook.round.GridAssignment;
import dev.rungbook.round.LayerRounding;
import dev.rungbook.round.Rounding;
import dev.rungbook.tensor.FloatFormat;
import dev.rungbook.tensor.Tensor;
import java.util.Arrays;

/**
 * Runs one {@link Quantizer} on one tensor: validation, then one pass per segment (gather, range, scale, round,
 * dequantize, scatter). Package-private; the hot loops read the tensor's backing array directly.
 */
final class Engine {
    private final Quantizer q;
    private final Tensor t;
    private final Progress progress;
    private final String task;
    private final float[] data;
    private final int n;
    private final int[] shape;
    private Segments seg;
    /** Flat indices of segment {@link #indexSegment}, for rules that need each element's index. */
    private int[] indices;
    private int indexSegment = -1;
    /** Whether the fused segment kernels may run; false sends every spec down the general per-segment path. */
    private final boolean kernels;

    /**
     * The system property that, set to {@code false}, turns the fused segment kernels off (read at each run; for
     * benchmarks that time both paths in one JVM). The results are the same bits either way.
     */
    static final String KERNELS_PROPERTY = "rungbook.segmentKernels";

    /** Which loop the last {@link #run} took ("fused", "kernel" or "general"), for tests of the routing. */
    private String path = "general";

    Engine(Quantizer q, Tensor t, Progress progress) {
        this(q, t, progress, !"false".equals(System.getProperty(KERNELS_PROPERTY)));
    }

    /** An engine that uses the fused segment kernels for the specs they cover only if {@code kernels}. */
    Engine(Quantizer q, Tensor t, Progress progress, boolean kernels) {
        this.kernels = kernels;
        this.q = q;
        this.t = t;
        this.progress = progress;
        this.task = "quantize " + (t.name() == null ? "tensor" : t.name()) + " " + q.label();
        this.data = TensorAccess.data(t);
        this.n = t.size();
        this.shape = t.shape();
    }

    private IllegalArgumentException refuse(String what) {
        return new IllegalArgumentException(t.label() + ": " + what + " (spec " + q.label() + ")");
    }

    // ------------------------------------------------------------------ validation

    private int resolveAxis() {
        String problem = axisProblem(shape, q.granularity);
        if (problem != null) {
            throw refuse(problem);
        }
        return resolvedAxis(shape, q.granularity);
    }

    /** The axis {@code g} works on in a tensor of {@code shape} (-1 per tensor); call after {@link #axisProblem}. */
    static int resolvedAxis(int[] shape, Granularity g) {
        if (g.kind() == Granularity.Kind.TENSOR) {
            return -1;
        }
        return g.axis() == -1 ? shape.length - 1 : g.axis();
    }

    /** Why {@code g} does not fit a tensor of {@code shape}, or null if it does. */
    static String axisProblem(int[] shape, Granularity g) {
        if (g.kind() == Granularity.Kind.TENSOR) {
            return null;
        }
        int axis = resolvedAxis(shape, g);
        if (axis < 0 || axis >= shape.length) {
            return "axis " + (g.axis() == -1 ? "-1 (last)" : Integer.toString(g.axis()))
                    + " is out of range for shape " + Arrays.toString(shape);
        }
        if (g.kind() == Granularity.Kind.GROUP && shape[axis] % g.groupSize() != 0) {
            return "group size " + g.groupSize() + " does not divide dimension " + axis + " of shape "
                    + Arrays.toString(shape);
        }
        return null;
    }

    /** Refuses NaN and infinities (naming the first); returns the largest magnitude. */
    private float checkFinite() {
        float amax = Lanes.maxAbs(data, 0, n);
        if (!Float.isFinite(amax)) {
            for (int i = 0; i < n; i++) {
                if (!Float.isFinite(data[i])) {
                    throw refuse("value " + data[i] + " at index " + i + " " + position(i)
                            + "; NaN and infinite values cannot be quantized");
                }
            }
        }
        return amax;
    }

    /** Magnitudes beyond this take the general path, whose double arithmetic cannot overflow float32. */
    private static final float FUSED_LIMIT = 1e37f;
    private float maxAbs;

    private String position(int flat) {
        int[] idx = new int[shape.length];
        int r = flat;
        for (int k = shape.length - 1; k >= 0; k--) {
            idx[k] = shape[k] == 0 ? 0 : r % shape[k];
            r = shape[k] == 0 ? 0 : r / shape[k];
        }
        return Arrays.toString(idx);
    }

    private String segmentName(int s) {
        if (seg.axis < 0) {
            return "whole tensor";
        }
        return seg.groupSize == 0 ? "channel " + s + " of axis " + seg.axis
                : "group " + s + " (size " + seg.groupSize + " along axis " + seg.axis + ")";
    }

    // ------------------------------------------------------------------ driver

    Quantized run() {
        int axis = resolveAxis();
        seg = new Segments(shape, q.granularity, axis);
        // The segment kernels that reduce every segment first (min/max or max |x|) see a NaN or infinity there and
        // then refuse the tensor exactly as checkFinite does, which saves a pass over the values; every other path
        // checks the whole tensor first.
        if (q.kind == Quantizer.Kind.LINEAR && !(q.rounding instanceof LayerRounding) && !fusedSpec()
                && linearKernelEligible()) {
            return linearKernel();
        }
        if (q.kind == Quantizer.Kind.FLOAT && q.scaled && floatKernelEligible()) {
            return floatKernel();
        }
        if (q.kind == Quantizer.Kind.NF4 && !q.pow2 && nf4KernelEligible()) {
            return nf4Kernel();
        }
        if (q.kind == Quantizer.Kind.LINEAR && !(q.rounding instanceof LayerRounding) && fusedSpec()) {
            // The row kernel takes every row's min/max before it quantizes the row and refuses NaN and infinity
            // itself; it returns the largest magnitude, and beyond FUSED_LIMIT its result is dropped for the
            // general path, which is what a check of the values first would have chosen.
            Quantized r = linearFused();
            if (r != null) {
                path = "fused";
                return r;
            }
            return linearKernelEligible() ? linearKernel() : linear();
        }
        maxAbs = checkFinite();
        switch (q.kind) {
            case LINEAR:
                if (q.rounding instanceof LayerRounding) {
                    return linearLayer();
                }
                return linearKernelEligible() ? linearKernel() : linear();
            case FLOAT:
                return floatKernelEligible() ? floatKernel() : floatFormat();
            case LOG:
                return levelsGrid(logLevels(q.bits));
            case NF4:
                return nf4KernelEligible() ? nf4Kernel() : levelsGrid(Nf4.levels());
            case MX:
                return mx();
            case CODEBOOK:
                return codebook();
            default:
                return signGrid();
        }
    }

    /** Which loop the last {@link #run} took: "fused" (the row kernel), "kernel" (a segment kernel) or "general". */
    String path() {
        return path;
    }

    private void step(int s) {
        Progress.checkInterrupted(task);
        if (seg.count > 1 && ((s & 63) == 63 || s == seg.count - 1)) {
            progress.update(task, s + 1, seg.count, Double.NaN);
        }
    }

    private Tensor wrapDequantized(float[] deq) {
        return TensorAccess.wrap(deq, shape, t.dtype(), t.name());
    }

    /** A range context for segment {@code s}; {@code err} evaluates a candidate range. */
    private RangeContext context(int s, boolean symmetric, int bits, SegmentError err) {
        return new RangeContext() {
            @Override
            public String label() {
                return t.label() + " " + segmentName(s) + " (" + q.label() + ")";
            }

            @Override
            public int bits() {
                return bits;
            }

            @Override
            public boolean symmetric() {
                return symmetric;
            }

            @Override
            public int[] shape() {
                return shape.clone();
            }

            @Override
            public int flatIndex(int j) {
                return seg.flatIndex(s, j);
            }

            @Override
            public double squaredError(float[] values, int from, int to, Range range) {
                return err.sse(values, from, to, range, s);
            }
        };
    }

    /** Squared error of a segment's values at a candidate range. */
    @FunctionalInterface
    private interface SegmentError {
        double sse(float[] values, int from, int to, Range range, int segment);
    }

    // ------------------------------------------------------------------ scale helpers

    /** The smallest power of two at least {@code s} (s positive and finite). */
    static double pow2Ceil(double s) {
        double p = Math.scalb(1.0, Math.getExponent(s));
        return p >= s ? p : 2 * p;
    }

    /**
     * The power-of-two scale for {@code s} as a float32: {@link #pow2Ceil}, but never below the smallest float32,
     * {@link Float#MIN_VALUE} = 2^-149 (itself a power of two), so that a segment of tiny values does not get the
     * scale 0 (which would turn its values to 0 or, divided by 0, to NaN). Still at least {@code s}.
     */
    static float pow2Scale(double s) {
        return Math.max((float) pow2Ceil(s), Float.MIN_VALUE);
    }

    // ------------------------------------------------------------------ linear grids

    /** {scale, zero point} of a linear grid for a clipping range. */
    private float[] linearParams(Range r) {
        int qmin = q.qmin();
        int qmax = q.qmax();
        if (q.symmetric) {
            double a = q.unsigned ? Math.max(0.0, r.hi()) : r.absMax();
            float z = q.midRise ? -0.5f : 0f;
            if (!(a > 0)) {
                // an all-zero segment: a mid-rise grid has no level at 0, so its levels +-s/2 must vanish
                return new float[] {q.midRise ? Float.MIN_VALUE : 1f, z};
            }
            // a mid-rise grid's cells cover [-a, a] (overload point a); otherwise the top level is a itself
            double s = q.midRise ? a / (qmax + 1.0) : a / qmax;
            float sf = q.pow2 ? pow2Scale(s) : q.midRise ? Math.max((float) s, Float.MIN_VALUE)
                    : Scales.fit(s, a, qmax);
            return new float[] {sf, z};
        }
        double lo = Math.min(r.lo(), 0.0);
        double hi = Math.max(r.hi(), 0.0);
        double s = (hi - lo) / ((double) qmax - qmin);
        if (!(s > 0)) {
            return new float[] {1f, (float) Math.max(qmin, Math.min(qmax, 0))};
        }
        float sf = q.pow2 ? pow2Scale(s) : Math.max((float) s, Float.MIN_VALUE);
        double z = Math.max(qmin, Math.min(qmax, Math.rint(qmin - lo / sf)));
        if (!q.pow2) {
            sf = hi > 0 ? Scales.fit(sf, hi, qmax - z) : Scales.fit(sf, lo, qmin - z);
        }
        return new float[] {sf, (float) z + 0f}; // + 0f turns -0 into 0
    }

    /**
     * The scaled value {@code y = u + z} ({@code u = x / s}) with the float32 rounding of the scale taken out: a
     * {@code y} within {@code |u| 2^-22} of an integer (two float32 ulps of {@code u}, the most {@link Scales#fit}
     * moves the scale) is that integer, so that a value on a level stays on it under directed rules (floor, ceil,
     * stochastic, custom). Round to nearest needs no such care.
     */
    static double onLevel(double u, double y) {
        double r = Math.rint(y);
        return Math.abs(y - r) <= Math.abs(u) * 0x1p-22 ? r : y;
    }

    /** The element rule used for the linear grid (learned layer rules fall back to nearest inside range searches). */
    private ElementRounding elementRounding() {
        return q.rounding instanceof ElementRounding ? (ElementRounding) q.rounding : Rounding.nearest();
    }

    /** The flat indices of segment {@code s} (cached for the last segment asked). */
    private int[] indicesOf(int s) {
        if (indices == null) {
            indices = new int[seg.size];
        }
        if (indexSegment != s) {
            seg.flatIndices(s, indices);
            indexSegment = s;
        }
        return indices;
    }

    private double linearSse(float[] v, int from, int to, Range r, int s) {
        float[] p = linearParams(r);
        double sc = p[0];
        double z = p[1];
        double qmin = q.qmin();
        double qmax = q.qmax();
        ElementRounding rr = elementRounding();
        boolean nearest = rr == Rounding.nearest();
        int[] idx = nearest ? null : indicesOf(s);
        double sse = 0;
        double inv = 1 / sc;
        for (int i = from; i < to; i++) {
            double c = nearest ? nearestCode(v[i], sc, inv, z)
                    : rr.round(onLevel(v[i] / sc, v[i] / sc + z), idx[i - from]);
            c = c < qmin ? qmin : (c > qmax ? qmax : c);
            double e = (float) (sc * (c - z)) - (double) v[i];
            sse += e * e;
        }
        return sse;
    }

    /**
     * {@code rint(v / sc + z)}, bit for bit, mostly without the division: {@code v * inv + z} (with {@code inv =
     * 1 / sc}) differs from {@code v / sc + z} by a few units in the last place, so both round to the same integer
     * unless they lie that close to a half-integer; only then (and at exact ties) the division decides.
     */
    static double nearestCode(float v, double sc, double inv, double z) {
        double y = v * inv + z;
        double c = Math.rint(y);
        if (0.5 - Math.abs(y - c) <= 1e-12 * (Math.abs(y) + Math.abs(z) + 1)) {
            c = Math.rint(v / sc + z);
        }
        return c;
    }

    /**
     * Quantizes {@code v[0, m)} with scale {@code sc} and zero point {@code z}: codes into {@code codes}, values into
     * {@code deq}. The nearest-even rule runs as a plain loop without calls.
     */
    private void linearSegment(float[] v, int m, float scF, float zF, int s, ElementRounding rr, int[] codes,
            float[] deq) {
        linearSegment(v, m, scF, zF, s, rr, codes, deq, 0);
    }

    /**
     * {@link #linearSegment(float[], int, float, float, int, ElementRounding, int[], float[])} with the values
     * written to {@code deq[off, off + m)}.
     */
    private void linearSegment(float[] v, int m, float scF, float zF, int s, ElementRounding rr, int[] codes,
            float[] deq, int off) {
        double sc = scF;
        double z = zF;
        double qmin = q.qmin();
        double qmax = q.qmax();
        // The value is what the integer code stands for: rint can give -0.0, whose sign a code cannot carry.
        if (rr == Rounding.nearest()) {
            double inv = 1 / sc;
            for (int i = 0; i < m; i++) {
                double c = nearestCode(v[i], sc, inv, z);
                c = c < qmin ? qmin : (c > qmax ? qmax : c);
                codes[i] = (int) c;
                deq[off + i] = (float) (sc * (codes[i] - z));
            }
        } else {
            int[] idx = indicesOf(s);
            for (int i = 0; i < m; i++) {
                double u = v[i] / sc;
                double c = rr.round(onLevel(u, u + z), idx[i]);
                c = c < qmin ? qmin : (c > qmax ? qmax : c);
                codes[i] = (int) c;
                deq[off + i] = (float) (sc * (codes[i] - z));
            }
        }
    }

    private Quantized linear() {
        int m = seg.size;
        float[] deq = new float[n];
        float[] scales = new float[seg.count];
        float[] zps = new float[seg.count];
        ElementRounding rr = elementRounding();
        Codes codes = eachSegment(q.bits, !q.unsigned, deq, (s, buf, out, cbuf) -> {
            Range r = q.range.range(buf, 0, m, context(s, q.symmetric, q.bits, this::linearSse));
            float[] p = linearParams(r);
            scales[s] = p[0];
            zps[s] = p[1];
            linearSegment(buf, m, p[0], p[1], s, rr, cbuf, out);
        });
        return finish(deq, codes, scales, zps, null, linearOverhead());
    }

    /**
     * True for the common default: signed min-max grid with nearest-even rounding, one scale per row of a row-major
     * matrix (per channel of axis 0) or for the whole tensor. Those specs run through the fused row kernel.
     */
    /** Whether the row kernel serves the spec (for values below {@link #FUSED_LIMIT} in magnitude). */
    private boolean fusedSpec() {
        boolean rows = seg.axis < 0 || (seg.axis == 0 && seg.groupSize == 0);
        return rows && n > 0 && seg.size > 0 && !q.unsigned && !q.midRise && !q.pow2 && (q.symmetric || !q.narrow)
                && q.range.equals(dev.rungbook.range.RangeRule.minMax()) && q.rounding == Rounding.nearest();
    }

    /**
     * The fused path: one call of the row kernel (min/max, scale, rounding, dequantization in tight loops over the
     * backing array, {@code x / s} in float32). Rows whose values are all equal are then redone by the general path,
     * which reproduces such rows exactly. Returns null, with {@link #maxAbs} set, when some value reaches
     * {@link #FUSED_LIMIT} in magnitude; refuses NaN and infinity as {@link #checkFinite} does.
     */
    private Quantized linearFused() {
        int rows = seg.count;
        int cols = seg.size;
        float[] scales = new float[rows];
        int[] zpi = new int[rows];
        float[] deq = new float[n];
        double[] sqErr = new double[rows];
        Codes codes;
        byte[] b = null;
        short[] sh = null;
        Progress.checkInterrupted(task);
        float amax;
        try {
            if (q.bits <= 8) {
                b = new byte[n];
                amax = Fused.quantizeRows(data, rows, cols, q.bits, q.symmetric, scales, zpi, b, deq, sqErr, null);
                codes = Codes.wrap(b, q.bits, true);
            } else {
                sh = new short[n];
                amax = Fused.quantizeRows(data, rows, cols, q.bits, q.symmetric, scales, zpi, sh, deq, sqErr, null);
                codes = Codes.wrap(sh, q.bits, true);
            }
        } catch (IllegalArgumentException e) {
            checkFinite(); // the kernel found a NaN or infinity: refuse it naming the tensor and index
            throw e;
        }
        if (amax >= FUSED_LIMIT) {
            maxAbs = amax;
            return null;
        }
        float[] zps = new float[rows];
        for (int r = 0; r < rows; r++) {
            zps[r] = zpi[r];
        }
        float[] buf = null;
        float[] out = null;
        int[] cbuf = null;
        for (int r = 0; r < rows; r++) {
            if (sqErr[r] == 0 || !constantRow(r * cols, cols)) {
                continue;
            }
            if (buf == null) {
                buf = new float[cols];
                out = new float[cols];
                cbuf = new int[cols];
            }
            seg.gather(data, r, buf);
            float[] p = linearParams(dev.rungbook.range.RangeRule.minMax().range(buf, 0, cols,
                    context(r, q.symmetric, q.bits, this::linearSse)));
            scales[r] = p[0];
            zps[r] = p[1];
            linearSegment(buf, cols, p[0], p[1], r, Rounding.nearest(), cbuf, out);
            seg.scatter(out, r, deq);
            seg.scatterCodes(cbuf, r, codes);
        }
        if (rows > 1) {
            progress.update(task, rows, rows, Double.NaN);
        }
        progress.finish(task);
        return finish(deq, codes, scales, zps, null, linearOverhead());
    }

    private boolean constantRow(int off, int cols) {
        float first = data[off];
        for (int i = off + 1; i < off + cols; i++) {
            if (data[i] != first) {
                return false;
            }
        }
        return true;
    }

    private long linearOverhead() {
        long perSegment = (q.pow2 ? 8 : 32) + (q.symmetric ? 0 : q.bits);
        return perSegment * seg.count;
    }

    private Quantized linearLayer() {
        int m = seg.size;
        float[] buf = new float[m];
        float[] scales = new float[seg.count];
        float[] zps = new float[seg.count];
        for (int s = 0; s < seg.count; s++) {
            step(s);
            seg.gather(data, s, buf);
            Range r = q.range.range(buf, 0, m, context(s, q.symmetric, q.bits, this::linearSse));
            float[] p = linearParams(r);
            scales[s] = p[0];
            zps[s] = p[1];
        }
        GridAssignment grid = GridAssignment.of(shape, seg.axis, seg.groupSize, q.qmin(), q.qmax(), scales, zps);
        LayerRounding rule = (LayerRounding) q.rounding;
        // Error feedback refits group scales from the updated weights as it reaches each group, as published.
        int[] c = rule instanceof ErrorFeedbackRounding
                ? ((ErrorFeedbackRounding) rule).codes(t, grid, (v, from, to) -> linearParams(q.range.range(v, from,
                        to, context(0, q.symmetric, q.bits, this::linearSse))), scales, zps, progress)
                : rule.codes(t, grid, progress);
        if (c == null || c.length != n) {
            throw refuse("rounding '" + rule.label() + "' returned " + (c == null ? "no codes" : c.length + " codes")
                    + " for " + n + " elements");
        }
        Codes codes = Codes.allocate(n, q.bits, !q.unsigned);
        float[] deq = new float[n];
        for (int i = 0; i < n; i++) {
            if (c[i] < grid.qmin() || c[i] > grid.qmax()) {
                throw refuse("rounding '" + rule.label() + "' returned code " + c[i] + " at index " + i + " "
                        + position(i) + ", outside [" + grid.qmin() + ", " + grid.qmax() + "]");
            }
            int s = grid.segmentOf(i);
            codes.set(i, c[i]);
            deq[i] = (float) ((double) scales[s] * (c[i] - (double) zps[s]));
        }
        progress.finish(task);
        return finish(deq, codes, scales, zps, null, linearOverhead());
    }

    // ------------------------------------------------------------------ fused segment kernels

    /*
     * Contiguous segments (the whole tensor, rows of axis 0, groups along the last axis) with the min-max range run
     * through internal.SegmentKernels, which gives the general path's results bit for bit (codes, scales, zero points,
     * values); everything else, and every spec when the kernels are off, takes the general path.
     */

    /** Values per kernel call inside a segment (bounds the scratch of the level kernel). */
    private static final int KERNEL_CHUNK = 4096;

    private boolean kernelSegments() {
        return kernels && n > 0 && seg.size > 0 && seg.contiguous()
                && q.range.equals(dev.rungbook.range.RangeRule.minMax());
    }

    /** Linear grids with nearest-even rounding and an integer zero point (not mid-rise). */
    private boolean linearKernelEligible() {
        return kernelSegments() && q.rounding == Rounding.nearest() && !q.midRise;
    }

    /** Float formats (the range matters only when scaled; every contiguous segment then has the min-max range). */
    private boolean floatKernelEligible() {
        return kernels && n > 0 && seg.size > 0 && seg.contiguous()
                && (!q.scaled || q.range.equals(dev.rungbook.range.RangeRule.minMax()));
    }

    /** NF4 with the absmax scale (a power-of-two scale near the float32 limit would be infinite: general path). */
    private boolean nf4KernelEligible() {
        return kernelSegments() && !(q.pow2 && maxAbs > 0x1p126f);
    }

    /** A positive finite scale, as the kernels need (a power-of-two scale can underflow to 0). */
    private static boolean usualScale(float sc) {
        return sc > 0 && sc < Float.POSITIVE_INFINITY;
    }

    /** Values per run of segments that the kernels take in one call (a row of 4096 floats stays in L1). */
    private static final int RUN_VALUES = 4096;

    /** The number of segments per kernel call: whole segments of at most {@link #RUN_VALUES} values, at least one. */
    private int runLength() {
        return Math.max(1, Math.min(seg.count, RUN_VALUES / seg.size));
    }

    /** {@link #step} for the run of {@code len} segments from {@code s}: one check, the reports of its segments. */
    private void stepRun(int s, int len) {
        Progress.checkInterrupted(task);
        int last = s + len - 1;
        if (seg.count > 1 && (((last + 1) >>> 6) != (s >>> 6) || last == seg.count - 1)) {
            int reported = last == seg.count - 1 ? seg.count : ((last + 1) & ~63);
            progress.update(task, reported, seg.count, Double.NaN);
        }
    }

    private Quantized linearKernel() {
        path = "kernel";
        int m = seg.size;
        float[] deq = new float[n];
        float[] scales = new float[seg.count];
        float[] zps = new float[seg.count];
        byte[] bytes = q.bits <= 8 ? new byte[n] : null;
        short[] shorts = bytes == null ? new short[n] : null;
        int qmin = q.qmin();
        int qmax = q.qmax();
        int run = runLength();
        float[] lo = new float[run];
        float[] hi = new float[run];
        float[] buf = null;
        int[] cbuf = null;
        // A signed symmetric grid needs only max |x| of a segment (its range is [-a, a]): then each run's kernel
        // takes the next run's magnitudes on the side (into hi), and the next run is read while this one is coded.
        boolean magnitudes = q.symmetric && !q.unsigned;
        if (magnitudes) {
            SegmentKernels.maxAbs(data, seg.offset(0), run, m, hi);
        }
        for (int s0 = 0; s0 < seg.count; s0 += run) {
            int len = Math.min(run, seg.count - s0);
            stepRun(s0, len);
            int off = seg.offset(s0); // contiguous: segment s0 + k starts at off + k * m
            if (magnitudes) {
                for (int k = 0; k < len; k++) {
                    lo[k] = -hi[k];
                }
            } else {
                SegmentKernels.minMax(data, off, len, m, lo, hi);
            }
            boolean usual = true;
            for (int k = 0; k < len; k++) {
                if (!(lo[k] >= -Float.MAX_VALUE && hi[k] <= Float.MAX_VALUE)) {
                    checkFinite(); // throws, naming the first NaN or infinity
                }
                float[] p = linearParams(new Range(lo[k], hi[k]));
                scales[s0 + k] = p[0];
                zps[s0 + k] = p[1];
                usual &= usualScale(p[0]);
            }
            int nextLen = magnitudes ? Math.max(0, Math.min(run, seg.count - s0 - len)) : 0;
            if (usual) {
                SegmentKernels.linear(data, off, len, m, scales, zps, s0, qmin, qmax, deq, bytes, shorts, nextLen,
                        hi);
                continue;
            }
            if (nextLen > 0) {
                SegmentKernels.maxAbs(data, off + len * m, nextLen, m, hi);
            }
            for (int k = 0; k < len; k++) {
                int s = s0 + k;
                int o = off + k * m;
                if (usualScale(scales[s])) {
                    SegmentKernels.linear(data, o, m, scales[s], zps[s], qmin, qmax, deq, bytes, shorts);
                    continue;
                }
                // a power-of-two scale that underflowed to 0 (or overflowed): the general loop, whatever it gives
                if (buf == null) {
                    buf = new float[m];
                    cbuf = new int[m];
                }
                System.arraycopy(data, o, buf, 0, m);
                linearSegment(buf, m, scales[s], zps[s], s, Rounding.nearest(), cbuf, deq, o);
                for (int i = 0; i < m; i++) {
                    if (bytes != null) {
                        bytes[o + i] = (byte) cbuf[i];
                    } else {
                        shorts[o + i] = (short) cbuf[i];
                    }
                }
            }
        }
        progress.finish(task);
        Codes codes = bytes != null ? Codes.wrap(bytes, q.bits, !q.unsigned) : Codes.wrap(shorts, q.bits, !q.unsigned);
        return finish(deq, codes, scales, zps, null, linearOverhead());
    }

    private Quantized nf4Kernel() {
        path = "kernel";
        int m = seg.size;
        float[] deq = new float[n];
        float[] scales = new float[seg.count];
        byte[] bytes = new byte[n];
        float[] y = new float[Math.min(m, KERNEL_CHUNK)];
        SegmentKernels.Levels table = Nf4.table();
        int run = runLength();
        float[] amax = new float[run];
        SegmentKernels.maxAbs(data, seg.offset(0), run, m, amax);
        for (int s0 = 0; s0 < seg.count; s0 += run) {
            int len = Math.min(run, seg.count - s0);
            stepRun(s0, len);
            int off = seg.offset(s0); // contiguous: segment s0 + k starts at off + k * m
            for (int k = 0; k < len; k++) {
                float a = amax[k];
                if (!(a <= Float.MAX_VALUE)) {
                    checkFinite(); // throws, naming the first NaN or infinity
                }
                scales[s0 + k] = q.pow2 ? levelScale(new Range(-a, a)) : (a > 0 ? a : 1f);
            }
            // the next run's largest magnitudes come on the side, into amax (read above)
            int nextLen = Math.max(0, Math.min(run, seg.count - s0 - len));
            SegmentKernels.levels(data, off, len, m, scales, s0, table, deq, bytes, y, nextLen, amax);
        }
        progress.finish(task);
        float[][] lv = new float[][] {Nf4.levels()};
        return finish(deq, Codes.wrap(bytes, q.bits, false), scales, null, lv, (long) (q.pow2 ? 8 : 32) * seg.count);
    }

    private Quantized floatKernel() {
        path = "kernel";
        FloatFormat f = q.format;
        int m = seg.size;
        float[] deq = new float[n];
        float[] scales = new float[seg.count];
        byte[] bytes = f.bitWidth() <= 8 ? new byte[n] : null;
        short[] shorts = bytes == null ? new short[n] : null;
        for (int s = 0; s < seg.count; s++) {
            step(s);
            int off = seg.offset(s);
            float sc = 1f;
            if (q.scaled) {
                float a = Lanes.maxAbs(data, off, off + m);
                if (!(a <= Float.MAX_VALUE)) {
                    checkFinite(); // throws, naming the first NaN or infinity
                }
                sc = floatScale(new Range(-a, a));
            }
            scales[s] = sc;
            if (!usualScale(sc)) {
                // a power-of-two scale that underflowed to 0: the general loop, whatever it gives
                for (int i = off; i < off + m; i++) {
                    float y = f.roundSaturating((float) (data[i] / (double) sc));
                    if (bytes != null) {
                        bytes[i] = (byte) f.encode(y);
                    } else {
                        shorts[i] = (short) f.encode(y);
                    }
                    deq[i] = (float) ((double) sc * y);
                }
                continue;
            }
            for (int c = 0; c < m; c += KERNEL_CHUNK) {
                SegmentKernels.floatGrid(data, off + c, Math.min(KERNEL_CHUNK, m - c), sc, f.exponentBits(),
                        f.mantissaBits(), f.max(), deq, bytes, shorts);
            }
        }
        progress.finish(task);
        Codes codes = bytes != null ? Codes.wrap(bytes, f.bitWidth(), false) : Codes.wrap(shorts, f.bitWidth(), false);
        long overhead = q.scaled ? (long) (q.pow2 ? 8 : 32) * seg.count : 0;
        return finish(deq, codes, scales, null, null, overhead);
    }

    // ------------------------------------------------------------------ float formats

    private float floatScale(Range r) {
        FloatFormat f = q.format;
        if (!q.scaled) {
            return 1f;
        }
        double a = r.absMax();
        if (!(a > 0)) {
            return 1f;
        }
        double s = a / f.max();
        return q.pow2 ? pow2Scale(s) : Scales.fit(s, a, f.max());
    }

    private double floatSse(float[] v, int from, int to, Range r, int s) {
        FloatFormat f = q.format;
        double sc = floatScale(r);
        double sse = 0;
        for (int i = from; i < to; i++) {
            float y = f.roundSaturating((float) (v[i] / sc));
            double e = (float) (sc * y) - (double) v[i];
            sse += e * e;
        }
        return sse;
    }

    private Quantized floatFormat() {
        FloatFormat f = q.format;
        int m = seg.size;
        float[] deq = new float[n];
        float[] scales = new float[seg.count];
        Codes codes = eachSegment(f.bitWidth(), false, deq, (s, buf, out, cbuf) -> {
            float sc = 1f;
            if (q.scaled) {
                Range r = q.range.range(buf, 0, m, context(s, true, f.bitWidth(), this::floatSse));
                sc = floatScale(r);
            }
            scales[s] = sc;
            for (int i = 0; i < m; i++) {
                float y = f.roundSaturating((float) (buf[i] / (double) sc));
                cbuf[i] = f.encode(y);
                out[i] = (float) ((double) sc * y);
            }
        });
        long overhead = q.scaled ? (long) (q.pow2 ? 8 : 32) * seg.count : 0;
        return finish(deq, codes, scales, null, null, overhead);
    }

    // ------------------------------------------------------------------ fixed-level grids (log, NF4)

    /** The levels of a b-bit logarithmic grid, ascending: -1, -1/2, ..., 0, ..., 1/2, 1. */
    static float[] logLevels(int bits) {
        int mags = (1 << (bits - 1)) - 1;
        float[] l = new float[2 * mags + 1];
        for (int e = 0; e < mags; e++) {
            float v = (float) Math.scalb(1.0, -e);
            l[e] = -v;
            l[l.length - 1 - e] = v;
        }
        l[mags] = 0f;
        return l;
    }

    /**
     * Index of the level nearest {@code y} in ascending levels with midpoints {@code mids} (from
     * {@link #midpoints}); ties go down: the number of midpoints strictly below {@code y}.
     */
    static int nearestLevel(double[] mids, double y) {
        return countBelow(mids, y);
    }

    /**
     * {@code nearestLevel(mids, v / sc)}, bit for bit, mostly without the division: {@code v * inv} (with
     * {@code inv = 1 / sc}) is within a few units in the last place of {@code v / sc}, so both fall between the
     * same midpoints unless one lies that close; only then the division decides.
     */
    static int nearestLevel(double[] mids, float v, double sc, double inv) {
        double y = v * inv;
        int c = countBelow(mids, y);
        double margin = 1e-12 * Math.abs(y);
        if ((c > 0 && y - mids[c - 1] <= margin) || (c < mids.length && mids[c] - y <= margin)) {
            c = countBelow(mids, v / sc);
        }
        return c;
    }

    /**
     * The midpoints of ascending {@code levels}, padded with {@code +Infinity} to a power-of-two length minus one
     * (the padding is never below a finite value, so counts are unchanged; see {@link #countBelow}).
     */
    static double[] midpoints(float[] levels) {
        double[] m = padded(levels.length - 1);
        for (int i = 0; i < levels.length - 1; i++) {
            m[i] = ((double) levels[i] + levels[i + 1]) / 2;
        }
        return m;
    }

    /** A {@code +Infinity}-filled array of length {@code 2^j - 1 >= count}. */
    private static double[] padded(int count) {
        int len = 1;
        while (len - 1 < count) {
            len <<= 1;
        }
        double[] a = new double[len - 1];
        Arrays.fill(a, Double.POSITIVE_INFINITY);
        return a;
    }

    private float levelScale(Range r) {
        double a = r.absMax();
        if (!(a > 0)) {
            return 1f;
        }
        return q.pow2 ? pow2Scale(a) : (float) a;
    }

    private Quantized levelsGrid(float[] levels) {
        double[] mids = midpoints(levels);
        int m = seg.size;
        float[] deq = new float[n];
        float[] scales = new float[seg.count];
        SegmentError err = (v, from, to, r, s) -> {
            double sc = levelScale(r);
            double sse = 0;
            for (int i = from; i < to; i++) {
                double e = (float) (sc * levels[nearestLevel(mids, v[i] / sc)]) - (double) v[i];
                sse += e * e;
            }
            return sse;
        };
        Codes codes = eachSegment(q.bits, false, deq, (s, buf, out, cbuf) -> {
            Range r = q.range.range(buf, 0, m, context(s, true, q.bits, err));
            float sc = levelScale(r);
            scales[s] = sc;
            double inv = 1 / (double) sc;
            for (int i = 0; i < m; i++) {
                int c = nearestLevel(mids, buf[i], sc, inv);
                cbuf[i] = c;
                out[i] = (float) ((double) sc * levels[c]);
            }
        });
        float[][] lv = new float[][] {levels.clone()};
        return finish(deq, codes, scales, null, lv, (long) (q.pow2 ? 8 : 32) * seg.count);
    }

    // ------------------------------------------------------------------ MX block formats

    private Quantized mx() {
        FloatFormat f = q.format;
        int emax = f == null ? 0 : f.maxExponent();
        int m = seg.size;
        float[] deq = new float[n];
        float[] scales = new float[seg.count];
        Codes codes = eachSegment(q.bits, f == null, deq, (s, buf, out, cbuf) -> {
            float amax = 0f;
            for (int i = 0; i < m; i++) {
                amax = Math.max(amax, Math.abs(buf[i]));
            }
            double sc = Math.scalb(1.0, MxScale.sharedExponent(amax, emax));
            scales[s] = (float) sc;
            if (f == null) {
                for (int i = 0; i < m; i++) {
                    double c = Math.rint(buf[i] / sc * 64.0);
                    c = c < -128 ? -128 : (c > 127 ? 127 : c);
                    cbuf[i] = (int) c;
                    out[i] = (float) (sc * cbuf[i] / 64.0);
                }
            } else {
                for (int i = 0; i < m; i++) {
                    float y = f.roundSaturating((float) (buf[i] / sc));
                    cbuf[i] = f.encode(y);
                    out[i] = (float) (sc * y);
                }
            }
        });
        return finish(deq, codes, scales, null, null, 8L * seg.count);
    }

    // ------------------------------------------------------------------ fitted codebooks

    private Quantized codebook() {
        int k = q.bits;
        int m = seg.size;
        float[] deq = new float[n];
        float[] scales = new float[seg.count];
        Arrays.fill(scales, 1f);
        float[][] levels = new float[seg.count][];
        if (kernels && seg.contiguous() && q.codeBits() <= 8) {
            // contiguous segments: fitted from the tensor's own array (a per-tensor fit needs no copy), codes and
            // values written in place
            byte[] bytes = new byte[n];
            for (int s = 0; s < seg.count; s++) {
                step(s);
                int off = seg.offset(s);
                float[] v = off == 0 && m == data.length ? data : Arrays.copyOfRange(data, off, off + m);
                Codebook1D.Result r = fitCodebook(v, s);
                levels[s] = floatLevels(r);
                if (!codebookKernel(data, off, m, levels[s], r.thresholds(), deq, bytes)) {
                    double[] search = searchTable(r);
                    for (int i = off; i < off + m; i++) {
                        int c = countBelow(search, data[i]);
                        bytes[i] = (byte) c;
                        deq[i] = levels[s][c];
                    }
                }
            }
            progress.finish(task);
            return finish(deq, Codes.wrap(bytes, q.codeBits(), false), scales, null, levels, 32L * k * seg.count);
        }
        byte[] scratch = new byte[m];
        Codes codes = eachSegment(q.codeBits(), false, deq, (s, buf, out, cbuf) -> {
            Codebook1D.Result r = fitCodebook(buf, s);
            float[] lf = floatLevels(r);
            levels[s] = lf;
            if (codebookKernel(buf, 0, m, lf, r.thresholds(), out, scratch)) {
                for (int i = 0; i < m; i++) {
                    cbuf[i] = scratch[i] & 0xFF;
                }
                return;
            }
            double[] search = searchTable(r);
            for (int i = 0; i < m; i++) {
                int c = countBelow(search, buf[i]);
                cbuf[i] = c;
                out[i] = lf[c];
            }
        });
        return finish(deq, codes, scales, null, levels, 32L * k * seg.count);
    }

    /** Fits segment {@code s}'s codebook to its values {@code v} (reporting progress for a single segment). */
    private Codebook1D.Result fitCodebook(float[] v, int s) {
        String fitTask = t.label() + (seg.axis < 0 ? "" : " " + segmentName(s)) + " (spec " + q.label() + ")";
        return Codebook1D.fit(v, q.bits, seg.count == 1 ? progress : null, fitTask);
    }

    private static float[] floatLevels(Codebook1D.Result r) {
        double[] lv = r.levels();
        float[] lf = new float[lv.length];
        for (int j = 0; j < lv.length; j++) {
            lf[j] = (float) lv[j];
        }
        return lf;
    }

    /** The decision points padded for {@link #countBelow}. */
    private static double[] searchTable(Codebook1D.Result r) {
        double[] th = r.thresholds();
        double[] search = padded(th.length);
        System.arraycopy(th, 0, search, 0, th.length);
        return search;
    }

    /**
     * The codebook's codes (the number of decision points strictly below each value) and values of
     * {@code v[off, off + m)} into {@code bytes} and {@code out} at the same indices, through the NF4 level kernel:
     * with a power-of-two scale {@code p >= max |x|}, {@code x / p}, the decision points over {@code p} and the
     * levels over {@code p} are exact, so counting the scaled points below the scaled value is the same count, and
     * {@code p * (level / p)} is the level. Returns false, doing nothing, where that does not hold (more than 128
     * levels, levels that collide as floats, a scaled level that would lose bits) or the kernels are off.
     */
    private boolean codebookKernel(float[] v, int off, int m, float[] lf, double[] th, float[] out, byte[] bytes) {
        if (!kernels || lf.length > 128) {
            return false;
        }
        float p = (float) pow2Ceil(Math.max(Lanes.maxAbs(v, off, off + m), Float.MIN_NORMAL));
        if (!(p < Float.POSITIVE_INFINITY)) {
            return false;
        }
        float[] scaled = new float[lf.length];
        for (int j = 0; j < lf.length; j++) {
            scaled[j] = lf[j] / p;
            if (scaled[j] * p != lf[j] || !(Math.abs(scaled[j]) <= 1f) || (j > 0 && !(scaled[j] > scaled[j - 1]))) {
                return false;
            }
        }
        double[] mids = new double[th.length];
        for (int j = 0; j < th.length; j++) {
            mids[j] = th[j] / p;
            if (!(Math.abs(mids[j]) <= 1) || (j > 0 && !(mids[j] >= mids[j - 1]))) {
                return false;
            }
        }
        SegmentKernels.levels(v, off, 1, m, new float[] {p}, 0, SegmentKernels.Levels.of(scaled, mids), out, bytes,
                new float[Math.min(m, KERNEL_CHUNK)]);
        path = "kernel";
        return true;
    }

    /**
     * The number of entries of ascending {@code a} strictly below {@code x}, for {@code a} of length {@code 2^j - 1}
     * (padded with {@code +Infinity}): a binary search of exactly {@code j} steps whose steps are conditional adds
     * (compiled to conditional moves), not branches, so it costs the same for every value; about 4.5 ns against
     * 21 ns for the branching search on 15 NF4 midpoints (measured on these machines).
     */
    static int countBelow(double[] a, double x) {
        int pos = 0;
        for (int step = (a.length + 1) >>> 1; step > 0; step >>>= 1) {
            pos += a[pos + step - 1] < x ? step : 0;
        }
        return pos;
    }

    // ------------------------------------------------------------------ binary and ternary

    private Quantized signGrid() {
        boolean ternary = q.kind == Quantizer.Kind.TERNARY;
        int m = seg.size;
        float[] deq = new float[n];
        float[] scales = new float[seg.count];
        Codes codes = eachSegment(ternary ? 2 : 1, true, deq, (s, buf, out, cbuf) -> {
            double sumAbs = 0;
            for (int i = 0; i < m; i++) {
                sumAbs += Math.abs(buf[i]);
            }
            double meanAbs = m == 0 ? 0 : sumAbs / m;
            double alpha;
            if (ternary) {
                double delta = q.thresholdFactor * meanAbs;
                double kept = 0;
                int count = 0;
                for (int i = 0; i < m; i++) {
                    double a = Math.abs(buf[i]);
                    if (a > delta) {
                        kept += a;
                        count++;
                    }
                }
                alpha = count == 0 ? 0 : kept / count;
                for (int i = 0; i < m; i++) {
                    cbuf[i] = Math.abs(buf[i]) > delta ? (buf[i] > 0 ? 1 : -1) : 0;
                }
            } else {
                alpha = meanAbs;
                for (int i = 0; i < m; i++) {
                    cbuf[i] = buf[i] >= 0 ? 1 : -1;
                }
            }
            float af = (float) alpha;
            scales[s] = af;
            for (int i = 0; i < m; i++) {
                out[i] = af * cbuf[i];
            }
        });
        return finish(deq, codes, scales, null, null, 32L * seg.count);
    }

    // ------------------------------------------------------------------ the segment loop

    /** Quantizes one segment: its values are in {@code buf}; values go to {@code out}, codes to {@code codes}. */
    @FunctionalInterface
    private interface SegmentBody {
        void quantize(int s, float[] buf, float[] out, int[] codes);
    }

    /**
     * The loop every segment-wise grid shares: for each segment, check for interruption and report, gather its
     * values, run {@code body}, scatter the values into {@code deq} and the codes into the returned {@link Codes}
     * ({@code codeBits} wide, {@code signed} as given). Contiguous segments write their codes straight into the
     * code array.
     */
    private Codes eachSegment(int codeBits, boolean signed, float[] deq, SegmentBody body) {
        int m = seg.size;
        float[] buf = new float[m];
        float[] out = new float[m];
        int[] cbuf = new int[m];
        byte[] bytes = codeBits <= 8 ? new byte[n] : null;
        short[] shorts = codeBits <= 8 ? null : new short[n];
        Codes codes = bytes != null ? Codes.wrap(bytes, codeBits, signed) : Codes.wrap(shorts, codeBits, signed);
        boolean contiguous = seg.contiguous();
        for (int s = 0; s < seg.count; s++) {
            step(s);
            seg.gather(data, s, buf);
            body.quantize(s, buf, out, cbuf);
            seg.scatter(out, s, deq);
            if (!contiguous) {
                seg.scatterCodes(cbuf, s, codes);
            } else if (bytes != null) {
                int off = seg.offset(s);
                for (int i = 0; i < m; i++) {
                    bytes[off + i] = (byte) cbuf[i];
                }
            } else {
                int off = seg.offset(s);
                for (int i = 0; i < m; i++) {
                    shorts[off + i] = (short) cbuf[i];
                }
            }
        }
        progress.finish(task);
        return codes;
    }

    // ------------------------------------------------------------------ result

    private Quantized finish(float[] deq, Codes codes, float[] scales, float[] zps, float[][] levels,
            long overheadBits) {
        int errorAxis = q.granularity.kind() == Granularity.Kind.CHANNEL ? seg.axis : (shape.length > 0 ? 0 : -1);
        return new Quantized(q, t, wrapDequantized(deq), codes, scales, seg.scaleShape(), zps, levels,
                overheadBits, errorAxis);
    }
}
