package dev.rungbook.internal;

import java.nio.ByteOrder;
import jdk.incubator.vector.DoubleVector;
import jdk.incubator.vector.FloatVector;
import jdk.incubator.vector.IntVector;
import jdk.incubator.vector.LongVector;
import jdk.incubator.vector.VectorOperators;
import jdk.incubator.vector.VectorSpecies;

/**
 * The register-blocked forward kernels of {@link ForwardKernels} on the JDK's incubating Vector API. Loaded (by
 * {@link ForwardKernels}) only when the JVM runs with {@code --add-modules jdk.incubator.vector}; nothing else may
 * refer to this class. Internal.
 *
 * <p>Each call computes one panel of output columns (one or two vectors wide, see {@link ForwardKernels}) for
 * blocks of four rows: the block's outputs stay in eight (or four) vector registers while the input index {@code t}
 * runs from 0 up, each step one broadcast input value per row times one packed weight vector, added with one
 * rounding ({@code fma}) for floats or as int32 (wrapping) for integers. Every output is therefore summed in the
 * same order as the scalar reference loop, bit for bit.
 */
final class VectorForward {
    /**
     * The preferred (512-bit with AVX-512) float vectors, stored as bytes ({@code intoByteArray}) into a small scratch
     * block and never combined with {@code add}/{@code mul}/{@code max}; {@link #unpack} moves each block into the
     * output with 256-bit vectors. Measured on Java 17: a first version stored with {@code FloatVector.intoArray} and
     * applied the ReLU with {@code max}; the sample classifier's float pass took 0.55 to 0.77 ms in a fresh JVM but
     * 21 ms once the quantizers had run. The JIT's inlining log showed why: the quantizers' error sums store and add
     * 256-bit float vectors, so the receiver-type profiles of those shared library methods held two vector classes,
     * the JIT inlined both, the vector class was no longer a constant and every vector was boxed. The same happened
     * again (2026-12-03, {@code ForwardCpuTime}): a 512-bit {@code intoArray} made the pass 20.6 ms instead of 1.5,
     * and a 256-bit int {@code fromArray} in the unpacking made the integer pass, whose int vectors are 512-bit, 23 ms
     * instead of 1.5. So every Vector API method has one shape throughout the library: the 512-bit float vectors
     * here only broadcast, load, fused multiply-add and store as bytes (no other float-vector callers), the unpacking
     * loads bytes and stores floats in the quantizers' 256-bit shape. A previous version stored the raw bits as int
     * vectors into a layer-sized int array and turned them into floats in a plain loop afterwards; the layer-sized
     * array and that loop took about as long as the products (the sample classifier's float pass: 1.25 ms before,
     * 0.84 ms after, fastest of 61 runs in one JVM).
     */
    private static final VectorSpecies<Float> F = FloatVector.SPECIES_PREFERRED;
    private static final VectorSpecies<Integer> I = IntVector.SPECIES_PREFERRED;
    /**
     * The requantization's 64-bit lanes: the shape of {@link #I}, so that an int vector is reinterpreted as longs
     * (its even lanes the low halves, its odd lanes the high halves) without a change of shape.
     */
    private static final VectorSpecies<Long> Q = LongVector.SPECIES_PREFERRED;
    /** The input quantization's lanes, as many as {@link #Q}'s. */
    private static final VectorSpecies<Double> D = DoubleVector.SPECIES_PREFERRED;
    /**
     * The convolution kernel's vectors: 256-bit, the shape of the library's other float-vector code, since this kernel
     * needs separate multiplies and adds (see {@link #F}).
     */
    private static final VectorSpecies<Float> C = FloatVector.SPECIES_256;
    /** The byte order of the float kernels' scratch blocks: the platform's, so that bytes move as they are. */
    private static final ByteOrder ORDER = ByteOrder.nativeOrder();

    private VectorForward() {
    }

    /** Lanes of the preferred float vector (the panel unit). */
    static int floatLanes() {
        return F.length();
    }

    static int intLanes() {
        return I.length();
    }

    /**
     * Float panel {@code [j0, j0 + width)} ({@code width} one or two vectors) of {@code y[n x out] = x[n x in] W^T +
     * b}: {@code pw} from {@code po} holds {@code in} rows of {@code width} weights, {@code pb} from {@code j0} the
     * bias padded to the panel; with {@code relu} each result {@code v} becomes {@code Math.max(v, 0)}. Each block's
     * results go as bytes (see {@link #F}) into a small scratch and from there, while it is in
     * the level-1 cache, into {@code y} ({@link #unpack}). Blocks of eight and four rows, then the rest one by one;
     * each case is a small method of its own, so that the JIT compiles each hot loop on its own profile.
     */
    static void floatPanel(float[] x, int n, int in, float[] pw, int po, float[] pb, int j0, int width, float[] y,
            int out, boolean relu) {
        int cols = Math.min(width, out - j0);
        int n8 = n & ~7;
        int n4 = n & ~3;
        if (width == 2 * F.length()) {
            floatTwo8(x, 0, n8, in, pw, po, pb, j0, y, out, cols, relu);
            floatTwo4(x, n8, n4, in, pw, po, pb, j0, y, out, cols, relu);
            floatTwo1(x, n4, n, in, pw, po, pb, j0, y, out, cols, relu);
        } else {
            floatOne8(x, 0, n8, in, pw, po, pb, j0, y, out, cols, relu);
            floatOne4(x, n8, n4, in, pw, po, pb, j0, y, out, cols, relu);
            floatOne1(x, n4, n, in, pw, po, pb, j0, y, out, cols, relu);
        }
    }

    /**
     * Integer panel {@code [j0, j0 + width)} of {@code acc[n x out] = init + x[n x in] W^T} in int32 (wrapping),
     * laid out as {@link #floatPanel}; {@code pi} from {@code j0} the initial values padded to the panel.
     */
    static void intPanel(int[] x, int n, int in, int[] pw, int po, int[] pi, int j0, int width, int[] y, int out) {
        int cols = Math.min(width, out - j0);
        int n4 = n & ~3;
        if (width == 2 * I.length()) {
            intTwo4(x, 0, n4, in, pw, po, pi, j0, y, out, cols);
            intTwo1(x, n4, n, in, pw, po, pi, j0, y, out, cols);
        } else {
            intOne4(x, 0, n4, in, pw, po, pi, j0, y, out, cols);
            intOne1(x, n4, n, in, pw, po, pi, j0, y, out, cols);
        }
    }

    /** Rows {@code [i0, i1)} ({@code i1 - i0} a multiple of 8) of a two-vector float panel. */
    private static void floatTwo8(float[] x, int i0, int i1, int in, float[] pw, int po, float[] pb, int j0, float[] y,
            int out, int cols, boolean relu) {
        int l = F.length();
        byte[] tmp = new byte[64 * l];
        FloatVector b0 = FloatVector.fromArray(F, pb, j0);
        FloatVector b1 = FloatVector.fromArray(F, pb, j0 + l);
        for (int i = i0; i < i1; i += 8) {
            int x0 = i * in;
            int x1 = x0 + in;
            int x2 = x1 + in;
            int x3 = x2 + in;
            int x4 = x3 + in;
            int x5 = x4 + in;
            int x6 = x5 + in;
            int x7 = x6 + in;
            FloatVector c00 = b0;
            FloatVector c01 = b1;
            FloatVector c10 = b0;
            FloatVector c11 = b1;
            FloatVector c20 = b0;
            FloatVector c21 = b1;
            FloatVector c30 = b0;
            FloatVector c31 = b1;
            FloatVector c40 = b0;
            FloatVector c41 = b1;
            FloatVector c50 = b0;
            FloatVector c51 = b1;
            FloatVector c60 = b0;
            FloatVector c61 = b1;
            FloatVector c70 = b0;
            FloatVector c71 = b1;
            for (int t = 0, p = po; t < in; t++, p += 2 * l) {
                FloatVector w0 = FloatVector.fromArray(F, pw, p);
                FloatVector w1 = FloatVector.fromArray(F, pw, p + l);
                FloatVector a = FloatVector.broadcast(F, x[x0 + t]);
                c00 = w0.fma(a, c00);
                c01 = w1.fma(a, c01);
                a = FloatVector.broadcast(F, x[x1 + t]);
                c10 = w0.fma(a, c10);
                c11 = w1.fma(a, c11);
                a = FloatVector.broadcast(F, x[x2 + t]);
                c20 = w0.fma(a, c20);
                c21 = w1.fma(a, c21);
                a = FloatVector.broadcast(F, x[x3 + t]);
                c30 = w0.fma(a, c30);
                c31 = w1.fma(a, c31);
                a = FloatVector.broadcast(F, x[x4 + t]);
                c40 = w0.fma(a, c40);
                c41 = w1.fma(a, c41);
                a = FloatVector.broadcast(F, x[x5 + t]);
                c50 = w0.fma(a, c50);
                c51 = w1.fma(a, c51);
                a = FloatVector.broadcast(F, x[x6 + t]);
                c60 = w0.fma(a, c60);
                c61 = w1.fma(a, c61);
                a = FloatVector.broadcast(F, x[x7 + t]);
                c70 = w0.fma(a, c70);
                c71 = w1.fma(a, c71);
            }
            c00.intoByteArray(tmp, 0, ORDER);
            c01.intoByteArray(tmp, 4 * l, ORDER);
            c10.intoByteArray(tmp, 8 * l, ORDER);
            c11.intoByteArray(tmp, 12 * l, ORDER);
            c20.intoByteArray(tmp, 16 * l, ORDER);
            c21.intoByteArray(tmp, 20 * l, ORDER);
            c30.intoByteArray(tmp, 24 * l, ORDER);
            c31.intoByteArray(tmp, 28 * l, ORDER);
            c40.intoByteArray(tmp, 32 * l, ORDER);
            c41.intoByteArray(tmp, 36 * l, ORDER);
            c50.intoByteArray(tmp, 40 * l, ORDER);
            c51.intoByteArray(tmp, 44 * l, ORDER);
            c60.intoByteArray(tmp, 48 * l, ORDER);
            c61.intoByteArray(tmp, 52 * l, ORDER);
            c70.intoByteArray(tmp, 56 * l, ORDER);
            c71.intoByteArray(tmp, 60 * l, ORDER);
            unpack(tmp, 8, 2 * l, y, i * out + j0, out, cols, relu);
        }
    }

    /** Rows {@code [i0, i1)} ({@code i1 - i0} a multiple of 4) of a two-vector float panel. */
    private static void floatTwo4(float[] x, int i0, int i1, int in, float[] pw, int po, float[] pb, int j0, float[] y,
            int out, int cols, boolean relu) {
        int l = F.length();
        byte[] tmp = new byte[32 * l];
        FloatVector b0 = FloatVector.fromArray(F, pb, j0);
        FloatVector b1 = FloatVector.fromArray(F, pb, j0 + l);
        for (int i = i0; i < i1; i += 4) {
            int x0 = i * in;
            int x1 = x0 + in;
            int x2 = x1 + in;
            int x3 = x2 + in;
            FloatVector c00 = b0;
            FloatVector c01 = b1;
            FloatVector c10 = b0;
            FloatVector c11 = b1;
            FloatVector c20 = b0;
            FloatVector c21 = b1;
            FloatVector c30 = b0;
            FloatVector c31 = b1;
            for (int t = 0, p = po; t < in; t++, p += 2 * l) {
                FloatVector w0 = FloatVector.fromArray(F, pw, p);
                FloatVector w1 = FloatVector.fromArray(F, pw, p + l);
                FloatVector a = FloatVector.broadcast(F, x[x0 + t]);
                c00 = w0.fma(a, c00);
                c01 = w1.fma(a, c01);
                a = FloatVector.broadcast(F, x[x1 + t]);
                c10 = w0.fma(a, c10);
                c11 = w1.fma(a, c11);
                a = FloatVector.broadcast(F, x[x2 + t]);
                c20 = w0.fma(a, c20);
                c21 = w1.fma(a, c21);
                a = FloatVector.broadcast(F, x[x3 + t]);
                c30 = w0.fma(a, c30);
                c31 = w1.fma(a, c31);
            }
            c00.intoByteArray(tmp, 0, ORDER);
            c01.intoByteArray(tmp, 4 * l, ORDER);
            c10.intoByteArray(tmp, 8 * l, ORDER);
            c11.intoByteArray(tmp, 12 * l, ORDER);
            c20.intoByteArray(tmp, 16 * l, ORDER);
            c21.intoByteArray(tmp, 20 * l, ORDER);
            c30.intoByteArray(tmp, 24 * l, ORDER);
            c31.intoByteArray(tmp, 28 * l, ORDER);
            unpack(tmp, 4, 2 * l, y, i * out + j0, out, cols, relu);
        }
    }

    /** Rows {@code [i0, i1)} of a two-vector float panel, one at a time. */
    private static void floatTwo1(float[] x, int i0, int i1, int in, float[] pw, int po, float[] pb, int j0, float[] y,
            int out, int cols, boolean relu) {
        int l = F.length();
        byte[] tmp = new byte[8 * l];
        FloatVector b0 = FloatVector.fromArray(F, pb, j0);
        FloatVector b1 = FloatVector.fromArray(F, pb, j0 + l);
        for (int i = i0; i < i1; i++) {
            int x0 = i * in;
            FloatVector c0 = b0;
            FloatVector c1 = b1;
            for (int t = 0, p = po; t < in; t++, p += 2 * l) {
                FloatVector a = FloatVector.broadcast(F, x[x0 + t]);
                c0 = FloatVector.fromArray(F, pw, p).fma(a, c0);
                c1 = FloatVector.fromArray(F, pw, p + l).fma(a, c1);
            }
            c0.intoByteArray(tmp, 0, ORDER);
            c1.intoByteArray(tmp, 4 * l, ORDER);
            unpack(tmp, 1, 2 * l, y, i * out + j0, out, cols, relu);
        }
    }

    /** Rows {@code [i0, i1)} ({@code i1 - i0} a multiple of 8) of a one-vector float panel. */
    private static void floatOne8(float[] x, int i0, int i1, int in, float[] pw, int po, float[] pb, int j0, float[] y,
            int out, int cols, boolean relu) {
        int l = F.length();
        byte[] tmp = new byte[32 * l];
        FloatVector b0 = FloatVector.fromArray(F, pb, j0);
        for (int i = i0; i < i1; i += 8) {
            int x0 = i * in;
            int x1 = x0 + in;
            int x2 = x1 + in;
            int x3 = x2 + in;
            int x4 = x3 + in;
            int x5 = x4 + in;
            int x6 = x5 + in;
            int x7 = x6 + in;
            FloatVector c00 = b0;
            FloatVector c10 = b0;
            FloatVector c20 = b0;
            FloatVector c30 = b0;
            FloatVector c40 = b0;
            FloatVector c50 = b0;
            FloatVector c60 = b0;
            FloatVector c70 = b0;
            for (int t = 0, p = po; t < in; t++, p += l) {
                FloatVector w0 = FloatVector.fromArray(F, pw, p);
                c00 = w0.fma(FloatVector.broadcast(F, x[x0 + t]), c00);
                c10 = w0.fma(FloatVector.broadcast(F, x[x1 + t]), c10);
                c20 = w0.fma(FloatVector.broadcast(F, x[x2 + t]), c20);
                c30 = w0.fma(FloatVector.broadcast(F, x[x3 + t]), c30);
                c40 = w0.fma(FloatVector.broadcast(F, x[x4 + t]), c40);
                c50 = w0.fma(FloatVector.broadcast(F, x[x5 + t]), c50);
                c60 = w0.fma(FloatVector.broadcast(F, x[x6 + t]), c60);
                c70 = w0.fma(FloatVector.broadcast(F, x[x7 + t]), c70);
            }
            c00.intoByteArray(tmp, 0, ORDER);
            c10.intoByteArray(tmp, 4 * l, ORDER);
            c20.intoByteArray(tmp, 8 * l, ORDER);
            c30.intoByteArray(tmp, 12 * l, ORDER);
            c40.intoByteArray(tmp, 16 * l, ORDER);
            c50.intoByteArray(tmp, 20 * l, ORDER);
            c60.intoByteArray(tmp, 24 * l, ORDER);
            c70.intoByteArray(tmp, 28 * l, ORDER);
            unpack(tmp, 8, l, y, i * out + j0, out, cols, relu);
        }
    }

    /** Rows {@code [i0, i1)} ({@code i1 - i0} a multiple of 4) of a one-vector float panel. */
    private static void floatOne4(float[] x, int i0, int i1, int in, float[] pw, int po, float[] pb, int j0, float[] y,
            int out, int cols, boolean relu) {
        int l = F.length();
        byte[] tmp = new byte[16 * l];
        FloatVector b0 = FloatVector.fromArray(F, pb, j0);
        for (int i = i0; i < i1; i += 4) {
            int x0 = i * in;
            int x1 = x0 + in;
            int x2 = x1 + in;
            int x3 = x2 + in;
            FloatVector c00 = b0;
            FloatVector c10 = b0;
            FloatVector c20 = b0;
            FloatVector c30 = b0;
            for (int t = 0, p = po; t < in; t++, p += l) {
                FloatVector w0 = FloatVector.fromArray(F, pw, p);
                c00 = w0.fma(FloatVector.broadcast(F, x[x0 + t]), c00);
                c10 = w0.fma(FloatVector.broadcast(F, x[x1 + t]), c10);
                c20 = w0.fma(FloatVector.broadcast(F, x[x2 + t]), c20);
                c30 = w0.fma(FloatVector.broadcast(F, x[x3 + t]), c30);
            }
            c00.intoByteArray(tmp, 0, ORDER);
            c10.intoByteArray(tmp, 4 * l, ORDER);
            c20.intoByteArray(tmp, 8 * l, ORDER);
            c30.intoByteArray(tmp, 12 * l, ORDER);
            unpack(tmp, 4, l, y, i * out + j0, out, cols, relu);
        }
    }

    /** Rows {@code [i0, i1)} of a one-vector float panel, one at a time. */
    private static void floatOne1(float[] x, int i0, int i1, int in, float[] pw, int po, float[] pb, int j0, float[] y,
            int out, int cols, boolean relu) {
        int l = F.length();
        byte[] tmp = new byte[4 * l];
        FloatVector b0 = FloatVector.fromArray(F, pb, j0);
        for (int i = i0; i < i1; i++) {
            int x0 = i * in;
            FloatVector c0 = b0;
            for (int t = 0, p = po; t < in; t++, p += l) {
                c0 = FloatVector.fromArray(F, pw, p).fma(FloatVector.broadcast(F, x[x0 + t]), c0);
            }
            c0.intoByteArray(tmp, 0, ORDER);
            unpack(tmp, 1, l, y, i * out + j0, out, cols, relu);
        }
    }

    /**
     * The first {@code cols} results of each of {@code rows} scratch rows ({@code stride} floats apart, in the
     * platform's byte order) into rows of {@code y} from {@code y0} ({@code out} apart), with {@code relu} as
     * {@code Math.max(v, 0)} (the vector {@code MAX} is {@code Math.max}, NaN and signed zeros included), while the
     * block is in the level-1 cache. Loaded and stored as 256-bit vectors, the shape of the library's other float
     * stores (see {@link #F}); the last {@code cols % 8} of a row one at a time.
     */
    private static void unpack(byte[] tmp, int rows, int stride, float[] y, int y0, int out, int cols, boolean relu) {
        int l = C.length();
        int vend = cols - cols % l;
        for (int r = 0; r < rows; r++) {
            int s = 4 * r * stride;
            int d = y0 + r * out;
            if (relu) {
                for (int j = 0; j < vend; j += l) {
                    FloatVector.fromByteArray(C, tmp, s + 4 * j, ORDER).max(0f).intoArray(y, d + j);
                }
            } else {
                for (int j = 0; j < vend; j += l) {
                    FloatVector.fromByteArray(C, tmp, s + 4 * j, ORDER).intoArray(y, d + j);
                }
            }
            for (int j = vend; j < cols; j++) {
                int k = s + 4 * j;
                float v = Float.intBitsToFloat(ORDER == ByteOrder.LITTLE_ENDIAN
                        ? (tmp[k] & 0xFF) | (tmp[k + 1] & 0xFF) << 8 | (tmp[k + 2] & 0xFF) << 16 | tmp[k + 3] << 24
                        : tmp[k] << 24 | (tmp[k + 1] & 0xFF) << 16 | (tmp[k + 2] & 0xFF) << 8 | (tmp[k + 3] & 0xFF));
                y[d + j] = relu ? Math.max(v, 0f) : v;
            }
        }
    }

    /**
     * The first {@code panels} two-vector panels of an integer layer, requantized: {@code y[s out + c]} becomes the
     * code of {@code init[c] + sum_t x[s, t] W[c, t]} (int32, wrapping) by the constants {@code p} (see
     * {@link #requantizeRows}, {@code cv} columns in vector blocks), for every row {@code s < n} and column
     * {@code c < panels * 2 L}. Each block of rows keeps its accumulators in registers as {@link #intPanel} does,
     * then moves them through a small scratch tile, which stays in the level-1 cache, to {@link #requantizeTile}:
     * the int32 sums never go to an array of the layer's size.
     */
    static void intLayerCodes(int[] x, int n, int in, int[] pw, int[] pi, int panels, int[] y, int out, long[] p,
            int cv, long c1, int s1, int zy, int lo, int qmax) {
        int l = I.length();
        int[] tile = new int[8 * l];
        int n4 = n & ~3;
        for (int k = 0; k < panels; k++) {
            int j0 = 2 * l * k;
            codesTwo4(x, n4, in, pw, j0 * in, pi, j0, y, out, tile, p, cv, c1, s1, zy, lo, qmax);
            codesTwo1(x, n4, n, in, pw, j0 * in, pi, j0, y, out, tile, p, cv, c1, s1, zy, lo, qmax);
        }
    }

    /** Rows {@code [0, n4)} ({@code n4} a multiple of 4) of {@link #intLayerCodes}'s panel at {@code j0}. */
    private static void codesTwo4(int[] x, int n4, int in, int[] pw, int po, int[] pb, int j0, int[] y, int out,
            int[] tile, long[] p, int cv, long c1, int s1, int zy, int lo, int qmax) {
        int l = I.length();
        IntVector b0 = IntVector.fromArray(I, pb, j0);
        IntVector b1 = IntVector.fromArray(I, pb, j0 + l);
        for (int i = 0; i < n4; i += 4) {
            int x0 = i * in;
            int x1 = x0 + in;
            int x2 = x1 + in;
            int x3 = x2 + in;
            IntVector c00 = b0;
            IntVector c01 = b1;
            IntVector c10 = b0;
            IntVector c11 = b1;
            IntVector c20 = b0;
            IntVector c21 = b1;
            IntVector c30 = b0;
            IntVector c31 = b1;
            for (int t = 0, q = po; t < in; t++, q += 2 * l) {
                IntVector w0 = IntVector.fromArray(I, pw, q);
                IntVector w1 = IntVector.fromArray(I, pw, q + l);
                IntVector a = IntVector.broadcast(I, x[x0 + t]);
                c00 = c00.add(w0.mul(a));
                c01 = c01.add(w1.mul(a));
                a = IntVector.broadcast(I, x[x1 + t]);
                c10 = c10.add(w0.mul(a));
                c11 = c11.add(w1.mul(a));
                a = IntVector.broadcast(I, x[x2 + t]);
                c20 = c20.add(w0.mul(a));
                c21 = c21.add(w1.mul(a));
                a = IntVector.broadcast(I, x[x3 + t]);
                c30 = c30.add(w0.mul(a));
                c31 = c31.add(w1.mul(a));
            }
            c00.intoArray(tile, 0);
            c01.intoArray(tile, l);
            c10.intoArray(tile, 2 * l);
            c11.intoArray(tile, 3 * l);
            c20.intoArray(tile, 4 * l);
            c21.intoArray(tile, 5 * l);
            c30.intoArray(tile, 6 * l);
            c31.intoArray(tile, 7 * l);
            requantizeTile(tile, 4, y, i * out + j0, out, j0, p, cv, c1, s1, zy, lo, qmax);
        }
    }

    /** Rows {@code [i0, i1)} of {@link #intLayerCodes}'s panel at {@code j0}, one at a time. */
    private static void codesTwo1(int[] x, int i0, int i1, int in, int[] pw, int po, int[] pb, int j0, int[] y,
            int out, int[] tile, long[] p, int cv, long c1, int s1, int zy, int lo, int qmax) {
        int l = I.length();
        IntVector b0 = IntVector.fromArray(I, pb, j0);
        IntVector b1 = IntVector.fromArray(I, pb, j0 + l);
        for (int i = i0; i < i1; i++) {
            int x0 = i * in;
            IntVector c0 = b0;
            IntVector c1v = b1;
            for (int t = 0, q = po; t < in; t++, q += 2 * l) {
                IntVector a = IntVector.broadcast(I, x[x0 + t]);
                c0 = c0.add(IntVector.fromArray(I, pw, q).mul(a));
                c1v = c1v.add(IntVector.fromArray(I, pw, q + l).mul(a));
            }
            c0.intoArray(tile, 0);
            c1v.intoArray(tile, l);
            requantizeTile(tile, 1, y, i * out + j0, out, j0, p, cv, c1, s1, zy, lo, qmax);
        }
    }

    /**
     * Requantizes {@code rows} rows of two int vectors each from {@code tile} (row stride {@code 2 L}), columns
     * {@code j0 .. j0 + 2 L}, into {@code y} from {@code y0} (row stride {@code out}); the arithmetic of
     * {@link #requantizeRows}.
     */
    private static void requantizeTile(int[] tile, int rows, int[] y, int y0, int out, int j0, long[] p, int cv,
            long c1, int s1, int zy, int lo, int qmax) {
        int l = I.length();
        int h = Q.length();
        IntVector top = IntVector.broadcast(I, qmax - zy);
        IntVector z = IntVector.broadcast(I, zy);
        IntVector low = IntVector.broadcast(I, lo);
        for (int v = 0; v < 2; v++) {
            int c = j0 + v * l;
            LongVector mE = LongVector.fromArray(Q, p, c);
            LongVector mO = LongVector.fromArray(Q, p, c + h);
            LongVector hE = LongVector.fromArray(Q, p, cv + c);
            LongVector hO = LongVector.fromArray(Q, p, cv + c + h);
            LongVector nE = LongVector.fromArray(Q, p, 2 * cv + c);
            LongVector nO = LongVector.fromArray(Q, p, 2 * cv + c + h);
            LongVector eE = LongVector.fromArray(Q, p, 3 * cv + c);
            LongVector eO = LongVector.fromArray(Q, p, 3 * cv + c + h);
            for (int r = 0; r < rows; r++) {
                LongVector a = IntVector.fromArray(I, tile, (2 * r + v) * l).reinterpretAsLongs();
                LongVector xe = a.lanewise(VectorOperators.LSHL, 32).lanewise(VectorOperators.ASHR, 32).mul(mE)
                        .add(c1).lanewise(VectorOperators.ASHR, s1);
                LongVector xo = a.lanewise(VectorOperators.ASHR, 32).mul(mO).add(c1)
                        .lanewise(VectorOperators.ASHR, s1);
                xe = xe.add(hE).add(xe.lanewise(VectorOperators.ASHR, 63).and(nE)).lanewise(VectorOperators.ASHR, eE);
                xo = xo.add(hO).add(xo.lanewise(VectorOperators.ASHR, 63).and(nO)).lanewise(VectorOperators.ASHR, eO);
                IntVector q = xe.and(0xFFFF_FFFFL).or(xo.lanewise(VectorOperators.LSHL, 32)).reinterpretAsInts();
                q.min(top).add(z).max(low).intoArray(y, y0 + r * out + v * l);
            }
        }
    }

    /** Rows {@code [i0, i1)} ({@code i1 - i0} a multiple of 4) of a two-vector int panel. */
    private static void intTwo4(int[] x, int i0, int i1, int in, int[] pw, int po, int[] pb, int j0, int[] y, int out,
            int cols) {
        int l = I.length();
        int[] tmp = new int[8 * l];
        IntVector b0 = IntVector.fromArray(I, pb, j0);
        IntVector b1 = IntVector.fromArray(I, pb, j0 + l);
        for (int i = i0; i < i1; i += 4) {
            int x0 = i * in;
            int x1 = x0 + in;
            int x2 = x1 + in;
            int x3 = x2 + in;
            IntVector c00 = b0;
            IntVector c01 = b1;
            IntVector c10 = b0;
            IntVector c11 = b1;
            IntVector c20 = b0;
            IntVector c21 = b1;
            IntVector c30 = b0;
            IntVector c31 = b1;
            for (int t = 0, p = po; t < in; t++, p += 2 * l) {
                IntVector w0 = IntVector.fromArray(I, pw, p);
                IntVector w1 = IntVector.fromArray(I, pw, p + l);
                IntVector a = IntVector.broadcast(I, x[x0 + t]);
                c00 = c00.add(w0.mul(a));
                c01 = c01.add(w1.mul(a));
                a = IntVector.broadcast(I, x[x1 + t]);
                c10 = c10.add(w0.mul(a));
                c11 = c11.add(w1.mul(a));
                a = IntVector.broadcast(I, x[x2 + t]);
                c20 = c20.add(w0.mul(a));
                c21 = c21.add(w1.mul(a));
                a = IntVector.broadcast(I, x[x3 + t]);
                c30 = c30.add(w0.mul(a));
                c31 = c31.add(w1.mul(a));
            }
            int y0 = i * out + j0;
            if (cols == 2 * l) {
                c00.intoArray(y, y0);
                c01.intoArray(y, y0 + l);
                c10.intoArray(y, y0 + out);
                c11.intoArray(y, y0 + out + l);
                c20.intoArray(y, y0 + 2 * out);
                c21.intoArray(y, y0 + 2 * out + l);
                c30.intoArray(y, y0 + 3 * out);
                c31.intoArray(y, y0 + 3 * out + l);
            } else { // a partial panel: through the scratch rows (no helper method: vectors must not leave this one)
                c00.intoArray(tmp, 0);
                c01.intoArray(tmp, l);
                c10.intoArray(tmp, 2 * l);
                c11.intoArray(tmp, 3 * l);
                c20.intoArray(tmp, 4 * l);
                c21.intoArray(tmp, 5 * l);
                c30.intoArray(tmp, 6 * l);
                c31.intoArray(tmp, 7 * l);
                for (int r = 0; r < 4; r++) {
                    System.arraycopy(tmp, 2 * l * r, y, y0 + r * out, cols);
                }
            }
        }
    }

    /** Rows {@code [i0, i1)} of a two-vector int panel, one at a time. */
    private static void intTwo1(int[] x, int i0, int i1, int in, int[] pw, int po, int[] pb, int j0, int[] y, int out,
            int cols) {
        int l = I.length();
        int[] tmp = new int[8 * l];
        IntVector b0 = IntVector.fromArray(I, pb, j0);
        IntVector b1 = IntVector.fromArray(I, pb, j0 + l);
        for (int i = i0; i < i1; i++) {
            int x0 = i * in;
            IntVector c0 = b0;
            IntVector c1 = b1;
            for (int t = 0, p = po; t < in; t++, p += 2 * l) {
                IntVector a = IntVector.broadcast(I, x[x0 + t]);
                c0 = c0.add(IntVector.fromArray(I, pw, p).mul(a));
                c1 = c1.add(IntVector.fromArray(I, pw, p + l).mul(a));
            }
            c0.intoArray(tmp, 0);
            c1.intoArray(tmp, l);
            System.arraycopy(tmp, 0, y, i * out + j0, cols);
        }
    }

    /** Rows {@code [i0, i1)} ({@code i1 - i0} a multiple of 4) of a one-vector int panel. */
    private static void intOne4(int[] x, int i0, int i1, int in, int[] pw, int po, int[] pb, int j0, int[] y, int out,
            int cols) {
        int l = I.length();
        int[] tmp = new int[8 * l];
        IntVector b0 = IntVector.fromArray(I, pb, j0);
        for (int i = i0; i < i1; i += 4) {
            int x0 = i * in;
            int x1 = x0 + in;
            int x2 = x1 + in;
            int x3 = x2 + in;
            IntVector c0 = b0;
            IntVector c1 = b0;
            IntVector c2 = b0;
            IntVector c3 = b0;
            for (int t = 0, p = po; t < in; t++, p += l) {
                IntVector w0 = IntVector.fromArray(I, pw, p);
                c0 = c0.add(w0.mul(IntVector.broadcast(I, x[x0 + t])));
                c1 = c1.add(w0.mul(IntVector.broadcast(I, x[x1 + t])));
                c2 = c2.add(w0.mul(IntVector.broadcast(I, x[x2 + t])));
                c3 = c3.add(w0.mul(IntVector.broadcast(I, x[x3 + t])));
            }
            c0.intoArray(tmp, 0);
            c1.intoArray(tmp, l);
            c2.intoArray(tmp, 2 * l);
            c3.intoArray(tmp, 3 * l);
            int y0 = i * out + j0;
            for (int r = 0; r < 4; r++) {
                System.arraycopy(tmp, l * r, y, y0 + r * out, cols);
            }
        }
    }

    /** Rows {@code [i0, i1)} of a one-vector int panel, one at a time. */
    private static void intOne1(int[] x, int i0, int i1, int in, int[] pw, int po, int[] pb, int j0, int[] y, int out,
            int cols) {
        int l = I.length();
        int[] tmp = new int[8 * l];
        IntVector b0 = IntVector.fromArray(I, pb, j0);
        for (int i = i0; i < i1; i++) {
            int x0 = i * in;
            IntVector c0 = b0;
            for (int t = 0, p = po; t < in; t++, p += l) {
                c0 = c0.add(IntVector.fromArray(I, pw, p).mul(IntVector.broadcast(I, x[x0 + t])));
            }
            c0.intoArray(tmp, 0);
            System.arraycopy(tmp, 0, y, i * out + j0, cols);
        }
    }

    /**
     * Requantizes {@code y[s out + c]} in place for the rows {@code s < n} and the columns {@code c < cv}
     * ({@code cv} a multiple of the int lanes) as {@link ForwardKernels.FixedPointColumns} defines it:
     * {@code P = acc * m0} in 64 bits, {@code x = (P + c1) >> s1}, {@code r = (x + half + ((x >> 63) & neg)) >> e},
     * then {@code max(lo, min(r, qmax - zy) + zy)}. {@code p} holds the per-column {@code m0}, {@code half},
     * {@code neg} and {@code e} in four sections of {@code cv} longs; within a section each block of int lanes lists
     * its even columns, then its odd ones, which is how an int vector reinterpreted as longs holds them (low half:
     * even lane). Every step is exact in 64 bits, and {@code r} fits an int, so the recombined low halves are the
     * results.
     */
    static void requantizeRows(int[] y, int n, int out, int cv, long[] p, long c1, int s1, int zy, int lo, int qmax) {
        int l = I.length();
        int h = Q.length();
        IntVector top = IntVector.broadcast(I, qmax - zy);
        IntVector z = IntVector.broadcast(I, zy);
        IntVector low = IntVector.broadcast(I, lo);
        for (int c = 0; c < cv; c += l) {
            LongVector mE = LongVector.fromArray(Q, p, c);
            LongVector mO = LongVector.fromArray(Q, p, c + h);
            LongVector hE = LongVector.fromArray(Q, p, cv + c);
            LongVector hO = LongVector.fromArray(Q, p, cv + c + h);
            LongVector nE = LongVector.fromArray(Q, p, 2 * cv + c);
            LongVector nO = LongVector.fromArray(Q, p, 2 * cv + c + h);
            LongVector eE = LongVector.fromArray(Q, p, 3 * cv + c);
            LongVector eO = LongVector.fromArray(Q, p, 3 * cv + c + h);
            for (int s = 0, q = c; s < n; s++, q += out) {
                LongVector v = IntVector.fromArray(I, y, q).reinterpretAsLongs();
                LongVector xe = v.lanewise(VectorOperators.LSHL, 32).lanewise(VectorOperators.ASHR, 32).mul(mE)
                        .add(c1).lanewise(VectorOperators.ASHR, s1);
                LongVector xo = v.lanewise(VectorOperators.ASHR, 32).mul(mO).add(c1)
                        .lanewise(VectorOperators.ASHR, s1);
                xe = xe.add(hE).add(xe.lanewise(VectorOperators.ASHR, 63).and(nE)).lanewise(VectorOperators.ASHR, eE);
                xo = xo.add(hO).add(xo.lanewise(VectorOperators.ASHR, 63).and(nO)).lanewise(VectorOperators.ASHR, eO);
                IntVector r = xe.and(0xFFFF_FFFFL).or(xo.lanewise(VectorOperators.LSHL, 32)).reinterpretAsInts();
                r.min(top).add(z).max(low).intoArray(y, q);
            }
        }
    }

    /**
     * {@code q[qo + i] = clamp(rint(u[i]) + zp, 0, qmax)} for {@code i < m} ({@code m} a multiple of the int lanes), NaN
     * giving 0, where the quotients {@code u} are laid out in {@code d} as {@link ForwardKernels#quantizeCodes}
     * writes them: per block of int lanes, the even elements' quotients, then the odd ones'. {@code rint} is
     * {@code (u + 1.5 * 2^52) - 1.5 * 2^52} (exact to the nearest integer, ties to even, for {@code |u| <= 2^51};
     * larger magnitudes keep their sign and clamp to the same end); the clamp is two comparisons (false for NaN);
     * each code is the low half of the bits of {@code code + 2^52}.
     */
    static void quantizeBlocks(double[] d, int m, double zp, double qmax, int[] q, int qo) {
        int l = I.length();
        int h = D.length();
        DoubleVector magic = DoubleVector.broadcast(D, 0x1.8p52);
        DoubleVector z = DoubleVector.broadcast(D, zp);
        DoubleVector top = DoubleVector.broadcast(D, qmax);
        DoubleVector zero = DoubleVector.zero(D);
        DoubleVector two52 = DoubleVector.broadcast(D, 0x1p52);
        for (int b = 0; b < m; b += l) {
            DoubleVector ce = DoubleVector.fromArray(D, d, b).add(magic).sub(magic).add(z);
            DoubleVector co = DoubleVector.fromArray(D, d, b + h).add(magic).sub(magic).add(z);
            ce = zero.blend(ce, ce.compare(VectorOperators.GT, zero)).blend(top, ce.compare(VectorOperators.GE, top));
            co = zero.blend(co, co.compare(VectorOperators.GT, zero)).blend(top, co.compare(VectorOperators.GE, top));
            LongVector e = ce.add(two52).reinterpretAsLongs().and(0xFFFF_FFFFL);
            LongVector o = co.add(two52).reinterpretAsLongs().lanewise(VectorOperators.LSHL, 32);
            e.or(o).reinterpretAsInts().intoArray(q, qo + b);
        }
    }

    /**
     * {@code y[yo + o p + q] = ((s0 + s1) + (s2 + s3)) + b[o]} for every output channel {@code o < out} and position
     * {@code q < p}, where {@code s_r} sums {@code w[o, t] * col[t, q]} (each product rounded, then added) over the
     * taps {@code t = r, r + 4, ...} below {@code k - k mod 4} in increasing order, and the last {@code k mod 4} taps
     * go to {@code s0}: the order of the dot-product kernel the convolution used before, so the same bits. {@code w}
     * is {@code [out, k]}, {@code col} {@code [k, p]} (positions contiguous). Vectors run over positions, two output
     * channels at a time; positions past the last whole vector take the scalar loop.
     */
    static void convPositions(float[] w, int out, int k, float[] col, int p, float[] b, float[] y, int yo) {
        int l = C.length();
        int pv = p - p % l;
        int o = 0;
        for (; o + 2 <= out; o += 2) {
            convTwo(w, o, k, col, p, pv, b, y, yo);
        }
        for (; o < out; o++) {
            convOne(w, o, k, col, p, pv, b, y, yo);
        }
        for (o = 0; o < out; o++) {
            int wo = o * k;
            for (int q = pv; q < p; q++) {
                float s0 = 0;
                float s1 = 0;
                float s2 = 0;
                float s3 = 0;
                int t = 0;
                for (; t + 3 < k; t += 4) {
                    s0 += w[wo + t] * col[t * p + q];
                    s1 += w[wo + t + 1] * col[(t + 1) * p + q];
                    s2 += w[wo + t + 2] * col[(t + 2) * p + q];
                    s3 += w[wo + t + 3] * col[(t + 3) * p + q];
                }
                for (; t < k; t++) {
                    s0 += w[wo + t] * col[t * p + q];
                }
                float c = (s0 + s1) + (s2 + s3);
                y[yo + o * p + q] = c + b[o];
            }
        }
    }

    /** Output channels {@code o} and {@code o + 1} of {@link #convPositions}, positions below {@code pv}. */
    private static void convTwo(float[] w, int o, int k, float[] col, int p, int pv, float[] b, float[] y, int yo) {
        int l = C.length();
        int wa = o * k;
        int wb = wa + k;
        FloatVector ba = FloatVector.broadcast(C, b[o]);
        FloatVector bb = FloatVector.broadcast(C, b[o + 1]);
        for (int q = 0; q < pv; q += l) {
            FloatVector a0 = FloatVector.zero(C);
            FloatVector a1 = a0;
            FloatVector a2 = a0;
            FloatVector a3 = a0;
            FloatVector c0 = a0;
            FloatVector c1 = a0;
            FloatVector c2 = a0;
            FloatVector c3 = a0;
            int t = 0;
            for (; t + 3 < k; t += 4) {
                FloatVector x0 = FloatVector.fromArray(C, col, t * p + q);
                FloatVector x1 = FloatVector.fromArray(C, col, (t + 1) * p + q);
                FloatVector x2 = FloatVector.fromArray(C, col, (t + 2) * p + q);
                FloatVector x3 = FloatVector.fromArray(C, col, (t + 3) * p + q);
                a0 = a0.add(x0.mul(w[wa + t]));
                a1 = a1.add(x1.mul(w[wa + t + 1]));
                a2 = a2.add(x2.mul(w[wa + t + 2]));
                a3 = a3.add(x3.mul(w[wa + t + 3]));
                c0 = c0.add(x0.mul(w[wb + t]));
                c1 = c1.add(x1.mul(w[wb + t + 1]));
                c2 = c2.add(x2.mul(w[wb + t + 2]));
                c3 = c3.add(x3.mul(w[wb + t + 3]));
            }
            for (; t < k; t++) {
                FloatVector x0 = FloatVector.fromArray(C, col, t * p + q);
                a0 = a0.add(x0.mul(w[wa + t]));
                c0 = c0.add(x0.mul(w[wb + t]));
            }
            a0.add(a1).add(a2.add(a3)).add(ba).intoArray(y, yo + o * p + q);
            c0.add(c1).add(c2.add(c3)).add(bb).intoArray(y, yo + (o + 1) * p + q);
        }
    }

    /** Output channel {@code o} of {@link #convPositions}, positions below {@code pv}. */
    private static void convOne(float[] w, int o, int k, float[] col, int p, int pv, float[] b, float[] y, int yo) {
        int l = C.length();
        int wa = o * k;
        FloatVector ba = FloatVector.broadcast(C, b[o]);
        for (int q = 0; q < pv; q += l) {
            FloatVector a0 = FloatVector.zero(C);
            FloatVector a1 = a0;
            FloatVector a2 = a0;
            FloatVector a3 = a0;
            int t = 0;
            for (; t + 3 < k; t += 4) {
                a0 = a0.add(FloatVector.fromArray(C, col, t * p + q).mul(w[wa + t]));
                a1 = a1.add(FloatVector.fromArray(C, col, (t + 1) * p + q).mul(w[wa + t + 1]));
                a2 = a2.add(FloatVector.fromArray(C, col, (t + 2) * p + q).mul(w[wa + t + 2]));
                a3 = a3.add(FloatVector.fromArray(C, col, (t + 3) * p + q).mul(w[wa + t + 3]));
            }
            for (; t < k; t++) {
                a0 = a0.add(FloatVector.fromArray(C, col, t * p + q).mul(w[wa + t]));
            }
            a0.add(a1).add(a2.add(a3)).add(ba).intoArray(y, yo + o * p + q);
        }
    }
}
