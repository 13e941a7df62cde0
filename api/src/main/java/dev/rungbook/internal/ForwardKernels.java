package dev.rungbook.internal;

import java.lang.invoke.MethodHandle;
import java.lang.invoke.MethodType;

/**
 * Forward-pass kernels of fully connected layers: {@code y[n x out] = x[n x in] W^T + b} in float32 and
 * {@code acc[n x out] = init + x[n x in] W^T} in int32, with the weight {@code W} ({@code [out, in]}, row-major)
 * packed once into panels of output columns. Internal.
 *
 * <p>Packing: the output columns are cut into panels two vectors wide ({@code 2 L} columns, {@code L} the lanes of
 * the JVM's preferred vectors, 16 with AVX-512; 8 on the plain path), the last one a single vector when at most {@code L} columns
 * remain; panel {@code [j0, j0 + width)} stores, for each input index {@code t}, the {@code width} weights
 * {@code W[j0 + jj, t]} next to each other (zeros past {@code out}), from offset {@code j0 * in}. A kernel then reads
 * each panel row as one or two vectors.
 *
 * <p>When the JVM runs with {@code --add-modules jdk.incubator.vector} (and the system property
 * {@code rungbook.vector} is not {@code false}) the panels run on the Vector API ({@link #vectorised()}): blocks of
 * four rows of {@code x} keep their outputs in registers while {@code t} runs. Otherwise plain loops over the same
 * panels run. Either way every output is summed from its bias (or initial value) over {@code t = 0, 1, ...} in
 * increasing order, each float step one fused multiply-add ({@link Math#fma}), exactly as
 * {@link #referenceAffine}; the results are those of the reference loops bit for bit (integers: exactly, int32
 * arithmetic wrapping as Java's does).
 *
 * <p>The integer-only network's other steps live here too: {@link FixedPointColumns} (per-column fixed-point
 * requantization, applied by {@link IntPanels#codes} to each block of accumulators as it leaves the registers) and
 * {@link #quantizeCodes} (input quantization); with the Vector API they run on 64-bit and double lanes, otherwise in
 * plain loops, with the same integers.
 */
public final class ForwardKernels {
    private static final MethodHandle FLOAT_PANEL;
    private static final MethodHandle INT_PANEL;
    private static final MethodHandle CONV_POSITIONS;
    private static final MethodHandle REQUANTIZE;
    private static final MethodHandle QUANTIZE;
    private static final MethodHandle INT_CODES;
    private static final int FLOAT_LANES;
    private static final int INT_LANES;

    static {
        MethodHandle[] h = Lanes.vectorMethods("dev.rungbook.internal.VectorForward",
                "floatPanel", MethodType.methodType(void.class, float[].class, int.class, int.class, float[].class,
                        int.class, float[].class, int.class, int.class, float[].class, int.class, boolean.class),
                "intPanel", MethodType.methodType(void.class, int[].class, int.class, int.class, int[].class,
                        int.class, int[].class, int.class, int.class, int[].class, int.class),
                "convPositions", MethodType.methodType(void.class, float[].class, int.class, int.class,
                        float[].class, int.class, float[].class, float[].class, int.class),
                "requantizeRows", MethodType.methodType(void.class, int[].class, int.class, int.class, int.class,
                        long[].class, long.class, int.class, int.class, int.class, int.class),
                "quantizeBlocks", MethodType.methodType(void.class, double[].class, int.class, double.class,
                        double.class, int[].class, int.class),
                "intLayerCodes", MethodType.methodType(void.class, int[].class, int.class, int.class, int[].class,
                        int[].class, int.class, int[].class, int.class, long[].class, int.class, long.class,
                        int.class, int.class, int.class, int.class),
                "floatLanes", MethodType.methodType(int.class),
                "intLanes", MethodType.methodType(int.class));
        int floatLanes = 8;
        int intLanes = 8;
        if (h[0] != null) {
            try {
                floatLanes = (int) h[6].invokeExact();
                intLanes = (int) h[7].invokeExact();
            } catch (Throwable e) { // no usable Vector API: the plain loops
                java.util.Arrays.fill(h, null);
            }
        }
        FLOAT_PANEL = h[0];
        INT_PANEL = h[1];
        CONV_POSITIONS = h[2];
        REQUANTIZE = h[3];
        QUANTIZE = h[4];
        INT_CODES = h[5];
        FLOAT_LANES = h[0] != null ? floatLanes : 8;
        INT_LANES = h[0] != null ? intLanes : 8;
    }

    private ForwardKernels() {
    }

    /** True when the panels run on the Vector API (see the class comment). */
    public static boolean vectorised() {
        return FLOAT_PANEL != null;
    }

    /** The width of the panel starting at column {@code j0} of {@code out}, panel unit {@code lanes}. */
    private static int panelWidth(int j0, int out, int lanes) {
        return out - j0 > lanes ? 2 * lanes : lanes;
    }

    /** {@code out} rounded up to whole panels. */
    private static int paddedColumns(int out, int lanes) {
        int j0 = 0;
        while (j0 < out) {
            j0 += panelWidth(j0, out, lanes);
        }
        return j0;
    }

    private static void checkShape(int out, int in, int length, String what) {
        Checks.require(out >= 0 && in >= 0 && (long) out * in == length, "%s: weight [%d, %d] needs %d values, got %d",
                what, out, in, (long) out * in, length);
    }

    private static void checkInput(int n, int in, int length, String what) {
        Checks.require(n >= 0 && (long) n * in <= length, "%s: input [%d, %d] needs %d values, got %d", what, n, in,
                (long) n * in, length);
    }

    /** A float weight {@code [out, in]} and bias {@code [out]} packed into panels; immutable. */
    public static final class FloatPanels {
        private final float[] w;
        private final float[] b;
        private final int out;
        private final int in;

        private FloatPanels(float[] w, float[] b, int out, int in) {
            this.w = w;
            this.b = b;
            this.out = out;
            this.in = in;
        }

        /**
         * Packs {@code w} ({@code [out, in]}, row-major) and {@code bias} ({@code [out]}); the arrays are copied, not
         * kept.
         */
        public static FloatPanels of(float[] w, float[] bias, int out, int in) {
            checkShape(out, in, w.length, "float panels");
            Checks.require(bias.length == out, "float panels: bias has %d values for %d outputs", bias.length, out);
            int padded = paddedColumns(out, FLOAT_LANES);
            float[] pw = new float[padded * in];
            float[] pb = new float[padded];
            System.arraycopy(bias, 0, pb, 0, out);
            for (int j0 = 0; j0 < out; j0 += panelWidth(j0, out, FLOAT_LANES)) {
                int width = panelWidth(j0, out, FLOAT_LANES);
                int base = j0 * in;
                for (int jj = 0; jj < width && j0 + jj < out; jj++) {
                    int row = (j0 + jj) * in;
                    for (int t = 0; t < in; t++) {
                        pw[base + t * width + jj] = w[row + t];
                    }
                }
            }
            return new FloatPanels(pw, pb, out, in);
        }

        /** Output features. */
        public int out() {
            return out;
        }

        /** Input features. */
        public int in() {
            return in;
        }

        /** {@code y[n x out] = x[n x in] W^T + b} as a new array; {@code x} is not modified. */
        public float[] affine(float[] x, int n) {
            return affine(x, n, false, FLOAT_PANEL != null);
        }

        /**
         * {@code max(0, x W^T + b)} ({@link Math#max}, element by element) as a new array: the affine map followed by
         * a ReLU, in one pass.
         */
        public float[] affineRelu(float[] x, int n) {
            return affine(x, n, true, FLOAT_PANEL != null);
        }

        /**
         * {@link #affine(float[], int)} (or with {@code relu} {@link #affineRelu}) on the Vector API panels or, with
         * {@code vector} false, the plain loops.
         */
        float[] affine(float[] x, int n, boolean relu, boolean vector) {
            Checks.require(!vector || FLOAT_PANEL != null, "float panels: the Vector API is not available");
            checkInput(n, in, x.length, "float panels");
            float[] y = new float[n * out];
            if (n == 0 || out == 0) {
                return y;
            }
            if (!vector) {
                for (int j0 = 0; j0 < out; j0 += panelWidth(j0, out, FLOAT_LANES)) {
                    plainFloatPanel(x, n, in, w, j0 * in, b, j0, panelWidth(j0, out, FLOAT_LANES), y, out, relu);
                }
                return y;
            }
            for (int j0 = 0; j0 < out; j0 += panelWidth(j0, out, FLOAT_LANES)) {
                try {
                    FLOAT_PANEL.invokeExact(x, n, in, w, j0 * in, b, j0, panelWidth(j0, out, FLOAT_LANES), y, out,
                            relu);
                } catch (Throwable e) {
                    throw Lanes.unchecked(e);
                }
            }
            return y;
        }
    }

    /** An int weight {@code [out, in]} packed into panels; immutable. */
    public static final class IntPanels {
        private final int[] w;
        private final int out;
        private final int in;

        private IntPanels(int[] w, int out, int in) {
            this.w = w;
            this.out = out;
            this.in = in;
        }

        /** Packs {@code w} ({@code [out, in]}, row-major); the array is copied, not kept. */
        public static IntPanels of(int[] w, int out, int in) {
            checkShape(out, in, w.length, "int panels");
            int padded = paddedColumns(out, INT_LANES);
            int[] pw = new int[padded * in];
            for (int j0 = 0; j0 < out; j0 += panelWidth(j0, out, INT_LANES)) {
                int width = panelWidth(j0, out, INT_LANES);
                int base = j0 * in;
                for (int jj = 0; jj < width && j0 + jj < out; jj++) {
                    int row = (j0 + jj) * in;
                    for (int t = 0; t < in; t++) {
                        pw[base + t * width + jj] = w[row + t];
                    }
                }
            }
            return new IntPanels(pw, out, in);
        }

        /** Output features. */
        public int out() {
            return out;
        }

        /** Input features. */
        public int in() {
            return in;
        }

        /**
         * {@code acc[n x out] = init[out] + x[n x in] W^T} in int32 arithmetic (wrapping on overflow, like Java's),
         * as a new array; the arguments are not modified.
         */
        public int[] accumulate(int[] x, int n, int[] init) {
            return accumulate(x, n, init, INT_PANEL != null);
        }

        /** {@link #accumulate(int[], int, int[])} on the Vector API or, with {@code vector} false, plain loops. */
        int[] accumulate(int[] x, int n, int[] init, boolean vector) {
            Checks.require(!vector || INT_PANEL != null, "int panels: the Vector API is not available");
            checkInput(n, in, x.length, "int panels");
            Checks.require(init.length == out, "int panels: %d initial values for %d outputs", init.length, out);
            int[] y = new int[n * out];
            if (n == 0 || out == 0) {
                return y;
            }
            int[] pi = new int[paddedColumns(out, INT_LANES)];
            System.arraycopy(init, 0, pi, 0, out);
            for (int j0 = 0; j0 < out; j0 += panelWidth(j0, out, INT_LANES)) {
                int width = panelWidth(j0, out, INT_LANES);
                if (vector) {
                    try {
                        INT_PANEL.invokeExact(x, n, in, w, j0 * in, pi, j0, width, y, out);
                    } catch (Throwable e) {
                        throw Lanes.unchecked(e);
                    }
                } else {
                    plainIntPanel(x, n, in, w, j0 * in, pi, j0, width, y, out);
                }
            }
            return y;
        }

        /**
         * The codes of {@code acc = init + x W^T} (int32, wrapping, as {@link #accumulate(int[], int, int[])}) on
         * the output grid: each accumulator requantized by {@code columns} and clamped to {@code [lo, qmax]} after
         * adding the zero point {@code zy} ({@link FixedPointColumns#apply}), as a new array. With the Vector API the
         * panels whose columns all lie in whole int vectors requantize each block of accumulators while it is in
         * registers, so the int32 sums never go to an array of the layer's size; the rest accumulate, then
         * requantize. The codes are the same either way.
         */
        public int[] codes(int[] x, int n, int[] init, FixedPointColumns columns, int zy, int lo, int qmax) {
            return codes(x, n, init, columns, zy, lo, qmax, INT_CODES != null);
        }

        /** {@link #codes(int[], int, int[], FixedPointColumns, int, int, int)}; {@code vector} false: plain loops. */
        int[] codes(int[] x, int n, int[] init, FixedPointColumns columns, int zy, int lo, int qmax, boolean vector) {
            Checks.require(!vector || INT_CODES != null, "int panels: the Vector API is not available");
            Checks.require(columns.out() == out, "int panels: %d requantization columns for %d outputs",
                    columns.out(), out);
            if (!vector) {
                int[] y = accumulate(x, n, init, false);
                columns.apply(y, n, zy, lo, qmax, false);
                return y;
            }
            checkInput(n, in, x.length, "int panels");
            Checks.require(init.length == out, "int panels: %d initial values for %d outputs", init.length, out);
            int[] y = new int[n * out];
            if (n == 0 || out == 0) {
                return y;
            }
            int[] pi = new int[paddedColumns(out, INT_LANES)];
            System.arraycopy(init, 0, pi, 0, out);
            // the two-vector panels whose columns all lie in the requantization's vector blocks
            int full = columns.vectorColumns() / (2 * INT_LANES);
            int done = full * 2 * INT_LANES;
            try {
                INT_CODES.invokeExact(x, n, in, w, pi, full, y, out, columns.constants(), columns.vectorColumns(),
                        columns.c1(), columns.s1(), zy, lo, qmax);
                for (int j0 = done; j0 < out; j0 += panelWidth(j0, out, INT_LANES)) {
                    INT_PANEL.invokeExact(x, n, in, w, j0 * in, pi, j0, panelWidth(j0, out, INT_LANES), y, out);
                }
            } catch (Throwable e) {
                throw Lanes.unchecked(e);
            }
            columns.applyPlain(y, n, done, zy, lo, qmax);
            return y;
        }
    }

    /**
     * The codes {@code clamp(rint(v[i] / s) + zp, 0, qmax)} of {@code v} on an unsigned grid with scale {@code s > 0}
     * and zero point {@code zp}, the quotient and the rounding (to nearest, ties to even) in double, NaN giving 0
     * (as {@code (int) NaN} does); as a new array. With the Vector API the quotients are divided one by one (the
     * same correctly rounded double division) into a scratch array and the rounding, clamp and conversion run on
     * vectors ({@code VectorForward.quantizeBlocks}); the last elements past a whole int vector, and everything
     * without the Vector API, run in a plain loop. The codes are the same.
     */
    public static int[] quantizeCodes(float[] v, double s, int zp, int qmax) {
        return quantizeCodes(v, s, zp, qmax, QUANTIZE != null);
    }

    /** {@link #quantizeCodes(float[], double, int, int)} on the Vector API or, with {@code vector} false, plainly. */
    static int[] quantizeCodes(float[] v, double s, int zp, int qmax, boolean vector) {
        Checks.require(!vector || QUANTIZE != null, "quantize codes: the Vector API is not available");
        int[] q = new int[v.length];
        int from = 0;
        if (vector) {
            int l = INT_LANES;
            int h = l / 2;
            int m = v.length - v.length % l;
            double[] d = new double[Math.min(m, 4096)];
            for (int b0 = 0; b0 < m; b0 += d.length) {
                int chunk = Math.min(d.length, m - b0);
                for (int b = 0; b < chunk; b += l) {
                    for (int k = 0; k < h; k++) {
                        d[b + k] = v[b0 + b + 2 * k] / s;
                        d[b + h + k] = v[b0 + b + 2 * k + 1] / s;
                    }
                }
                try {
                    QUANTIZE.invokeExact(d, chunk, (double) zp, (double) qmax, q, b0);
                } catch (Throwable e) {
                    throw Lanes.unchecked(e);
                }
            }
            from = m;
        }
        for (int i = from; i < v.length; i++) {
            // clamp(rint(v / s) + zp, 0, qmax) by comparisons: NaN fails both and gives 0, as (int) NaN does
            double c = Math.rint(v[i] / s) + zp;
            q[i] = c >= qmax ? qmax : c > 0 ? (int) c : 0;
        }
        return q;
    }

    /**
     * Per-column fixed-point requantization of int32 accumulators to clamped output codes, the integer-only rounding
     * of {@code dev.rungbook.nn.FixedPoint} in one form for every column: with {@code P = acc * m0} in 64 bits,
     * <pre>
     *   x = (P + c1) >> s1,   r = (x + half + ((x >> 63) &amp; neg)) >> e,   code = max(lo, min(r, qmax - zy) + zy)
     * </pre>
     * Double rounding (the published saturating rounding doubling high multiply, then the rounding right shift by
     * the column's {@code n} in [0, 31]): {@code c1 = 2^30, s1 = 31} and {@code e = n}, {@code half = 2^(n-1)},
     * {@code neg = -1} (0, 0 when {@code n = 0}). Single rounding (one shift by {@code k = 31 + n}, ties away from
     * zero): {@code c1 = 0, s1 = 0, e = k, half = 2^(k-1), neg = -1}. Why these are the published operations:
     * <ul>
     * <li>the high multiply adds {@code 2^30} to a non-negative {@code P} and {@code 1 - 2^30} to a negative one,
     * then divides by {@code 2^31} truncating toward zero; a negative sum {@code t} truncates to
     * {@code floor((t + 2^31 - 1) / 2^31)}, and {@code (P + 1 - 2^30) + 2^31 - 1 = P + 2^30}, so both cases are
     * {@code floor((P + 2^30) / 2^31)}; it cannot saturate, since {@code m0 >= 2^30} is never {@code INT32_MIN};
     * <li>the rounding right shift adds 1 to {@code x >> e} when the remainder {@code x mod 2^e} exceeds
     * {@code 2^(e-1) - 1} ({@code x >= 0}) or {@code 2^(e-1)} ({@code x < 0}), which is
     * {@code floor((x + 2^(e-1) - [x < 0]) / 2^e)}, and {@code x} itself when {@code e = 0};
     * <li>the single rounding's {@code -((2^(k-1) - P) >> k)} for negative {@code P} is
     * {@code floor((P + 2^(k-1) - 1) / 2^k)} the same way; its result fits an int for {@code k >= 31}, so it never
     * saturates;
     * <li>no sum overflows 64 bits ({@code |P| < 2^62}), every {@code r} fits an int, and clamping {@code r} below
     * {@code qmax - zy} before adding {@code zy} is clamping after.
     * </ul>
     * With the Vector API the columns below the last whole int vector run in {@code VectorForward} (64-bit lanes);
     * the others, and everything without the Vector API, in a plain loop of the same formula. Immutable.
     */
    public static final class FixedPointColumns {
        private final int out;
        private final int cv;
        private final long[] p;
        private final long c1;
        private final int s1;

        private FixedPointColumns(int out, int cv, long[] p, long c1, int s1) {
            this.out = out;
            this.cv = cv;
            this.p = p;
            this.c1 = c1;
            this.s1 = s1;
        }

        /**
         * The constants for columns with multipliers {@code m0} (Q31, in [2^30, 2^31)) and shifts {@code n}
         * (in [0, 31]), for the published double rounding or ({@code singleRounding}) the single one.
         *
         * @throws IllegalArgumentException naming the column whose multiplier or shift is out of range
         */
        public static FixedPointColumns of(int[] m0, int[] shift, boolean singleRounding) {
            Checks.require(m0.length == shift.length, "fixed-point columns: %d multipliers for %d shifts", m0.length,
                    shift.length);
            int out = m0.length;
            for (int c = 0; c < out; c++) {
                Checks.require(m0[c] >= (1 << 30), "fixed-point columns: multiplier %d of column %d is below 2^30",
                        m0[c], c);
                Checks.require(shift[c] >= 0 && shift[c] <= 31,
                        "fixed-point columns: shift %d of column %d is outside [0, 31]", shift[c], c);
            }
            int cv = out - out % INT_LANES;
            long[] p = new long[4 * out];
            for (int c = 0; c < out; c++) {
                int e = singleRounding ? 31 + shift[c] : shift[c];
                int at = position(c, cv);
                int stride = stride(c, out, cv);
                p[at] = m0[c];
                p[at + stride] = e == 0 ? 0 : 1L << (e - 1);
                p[at + 2 * stride] = e == 0 ? 0 : -1;
                p[at + 3 * stride] = e;
            }
            return new FixedPointColumns(out, cv, p, singleRounding ? 0 : 1L << 30, singleRounding ? 0 : 31);
        }

        /**
         * Index of column {@code c}'s multiplier: the columns below {@code cv} in blocks of int lanes, each block's
         * even columns first, then its odd ones (four sections of {@code cv} values: multiplier, half, neg, shift);
         * the rest after them, four sections of {@code out - cv}.
         */
        private static int position(int c, int cv) {
            if (c >= cv) {
                return 4 * cv + (c - cv);
            }
            int l = INT_LANES;
            return c - c % l + (c % 2) * (l / 2) + (c % l) / 2;
        }

        /** Distance between the four sections holding column {@code c}'s constants. */
        private static int stride(int c, int out, int cv) {
            return c >= cv ? out - cv : cv;
        }

        /** Columns. */
        public int out() {
            return out;
        }

        /** Columns served by whole int vectors (a multiple of the int lanes). */
        int vectorColumns() {
            return cv;
        }

        /** The per-column constants, laid out as {@code VectorForward.requantizeRows} reads them. */
        long[] constants() {
            return p;
        }

        /** The first step's added constant: {@code 2^30} (double rounding) or 0. */
        long c1() {
            return c1;
        }

        /** The first step's shift: 31 (double rounding) or 0. */
        int s1() {
            return s1;
        }

        /**
         * Replaces each accumulator {@code y[s out + c]} ({@code s < n}) by its code, clamped to
         * {@code [lo, qmax]} after adding the zero point {@code zy}.
         */
        public void apply(int[] y, int n, int zy, int lo, int qmax) {
            apply(y, n, zy, lo, qmax, REQUANTIZE != null);
        }

        /** {@link #apply(int[], int, int, int, int)} on the Vector API or, with {@code vector} false, a plain loop. */
        void apply(int[] y, int n, int zy, int lo, int qmax, boolean vector) {
            Checks.require(!vector || REQUANTIZE != null, "fixed-point columns: the Vector API is not available");
            checkInput(n, out, y.length, "fixed-point columns");
            int from = 0;
            if (vector && cv > 0) {
                try {
                    REQUANTIZE.invokeExact(y, n, out, cv, p, c1, s1, zy, lo, qmax);
                } catch (Throwable e) {
                    throw Lanes.unchecked(e);
                }
                from = cv;
            }
            applyPlain(y, n, from, zy, lo, qmax);
        }

        /** The plain loop of {@link #apply} for the columns from {@code from} on. */
        void applyPlain(int[] y, int n, int from, int zy, int lo, int qmax) {
            int top = qmax - zy;
            for (int c = from; c < out; c++) {
                int k = position(c, cv);
                int stride = stride(c, out, cv);
                long m0 = p[k];
                long half = p[k + stride];
                long neg = p[k + 2 * stride];
                int e = (int) p[k + 3 * stride];
                for (int s = 0, q = c; s < n; s++, q += out) {
                    long x = (y[q] * m0 + c1) >> s1;
                    int r = (int) ((x + half + ((x >> 63) & neg)) >> e);
                    y[q] = Math.max(lo, Math.min(r, top) + zy);
                }
            }
        }
    }

    /**
     * One sample of a convolution: {@code y[yo + o p + q] = ((s0 + s1) + (s2 + s3)) + b[o]}, where {@code s_r} sums
     * {@code w[o, t] * col[t, q]} (each product rounded, then added) over the taps {@code t = r, r + 4, ...} below
     * {@code k - k mod 4}, and the last {@code k mod 4} taps go to {@code s0}: the order of a dot product with four
     * partial sums, so any implementation gives the same bits. {@code w} is {@code [out, k]}, {@code col}
     * {@code [k, p]} (the receptive fields, tap-major: positions contiguous), {@code b} {@code [out]}. Runs on the
     * Vector API (vectors over positions); call only when {@link #vectorised()}.
     */
    public static void convPositions(float[] w, int out, int k, float[] col, int p, float[] b, float[] y, int yo) {
        Checks.require(CONV_POSITIONS != null, "convPositions: the Vector API is not available");
        Checks.require((long) out * k <= w.length && (long) k * p <= col.length && b.length >= out
                && yo >= 0 && yo + (long) out * p <= y.length, "convPositions: arrays too short for [%d, %d] x [%d, %d]",
                out, k, k, p);
        try {
            CONV_POSITIONS.invokeExact(w, out, k, col, p, b, y, yo);
        } catch (Throwable e) {
            throw Lanes.unchecked(e);
        }
    }

    /** The float panel as plain loops: one row at a time, the panel's outputs in a scratch row. */
    private static void plainFloatPanel(float[] x, int n, int in, float[] pw, int po, float[] pb, int j0, int width,
            float[] y, int out, boolean relu) {
        float[] acc = new float[width];
        int cols = Math.min(width, out - j0);
        for (int i = 0; i < n; i++) {
            System.arraycopy(pb, j0, acc, 0, width);
            int xi = i * in;
            for (int t = 0, p = po; t < in; t++, p += width) {
                float a = x[xi + t];
                for (int jj = 0; jj < width; jj++) {
                    acc[jj] = Math.fma(a, pw[p + jj], acc[jj]);
                }
            }
            if (relu) {
                for (int jj = 0; jj < width; jj++) {
                    acc[jj] = Math.max(0f, acc[jj]);
                }
            }
            System.arraycopy(acc, 0, y, i * out + j0, cols);
        }
    }

    /** The int panel as plain loops. */
    private static void plainIntPanel(int[] x, int n, int in, int[] pw, int po, int[] pi, int j0, int width, int[] y,
            int out) {
        int[] acc = new int[width];
        int cols = Math.min(width, out - j0);
        for (int i = 0; i < n; i++) {
            System.arraycopy(pi, j0, acc, 0, width);
            int xi = i * in;
            for (int t = 0, p = po; t < in; t++, p += width) {
                int a = x[xi + t];
                for (int jj = 0; jj < width; jj++) {
                    acc[jj] += a * pw[p + jj];
                }
            }
            System.arraycopy(acc, 0, y, i * out + j0, cols);
        }
    }

    /**
     * The reference: {@code y[i, o] = b[o]}, then {@code y[i, o] = fma(x[i, t], w[o, t], y[i, o])} for
     * {@code t = 0 .. in-1}; one output at a time, no packing. For tests and benchmarks.
     */
    public static float[] referenceAffine(float[] x, int n, float[] w, float[] b, int in, int out) {
        float[] y = new float[n * out];
        for (int i = 0; i < n; i++) {
            for (int o = 0; o < out; o++) {
                float s = b[o];
                for (int t = 0; t < in; t++) {
                    s = Math.fma(x[i * in + t], w[o * in + t], s);
                }
                y[i * out + o] = s;
            }
        }
        return y;
    }

    /** The reference: {@code acc[i, o] = init[o] + sum_t x[i, t] w[o, t]} in int32, one output at a time. */
    public static int[] referenceAccumulate(int[] x, int n, int[] w, int[] init, int in, int out) {
        int[] y = new int[n * out];
        for (int i = 0; i < n; i++) {
            for (int o = 0; o < out; o++) {
                int s = init[o];
                for (int t = 0; t < in; t++) {
                    s += x[i * in + t] * w[o * in + t];
                }
                y[i * out + o] = s;
            }
        }
        return y;
    }
}
