package dev.rungbook.internal;

import java.lang.invoke.MethodHandle;
import java.lang.invoke.MethodHandles;
import java.lang.invoke.MethodType;

/**
 * Small reductions over float arrays shared by the kernels. Internal.
 *
 * <p>Minimum and maximum do not depend on the order in which values are visited ({@link Math#min} and
 * {@link Math#max} order {@code -0.0} below {@code 0.0} and propagate NaN), so any faster form of these loops returns
 * the same bits. Java 17's JIT does not vectorise these reductions; when the JVM runs with
 * {@code --add-modules jdk.incubator.vector} (and the system property {@code rungbook.vector} is not
 * {@code false}) they run on the incubating Vector API instead ({@link #vectorised()}), with the same results; so
 * do {@link Fused}'s rows (codes, dequantized values and error sums in one pass), whose summation order is fixed
 * to eight lanes for that reason.
 */
public final class Lanes {
    private static final MethodHandle MIN_MAX;
    private static final MethodHandle MAX_ABS;
    private static final MethodHandle ERROR_SUMS;
    private static final MethodHandle QUANTIZE_ROWS;

    static {
        MethodHandle mm = null;
        MethodHandle ma = null;
        MethodHandle es = null;
        MethodHandle qr = null;
        Class<?> c = vectorClass("dev.rungbook.internal.VectorLanes");
        if (c != null) {
            try {
                MethodHandles.Lookup l = MethodHandles.lookup();
                mm = l.findStatic(c, "minMax", MethodType.methodType(float[].class, float[].class, int.class,
                        int.class, float.class, float.class));
                ma = l.findStatic(c, "maxAbs", MethodType.methodType(float.class, float[].class, int.class,
                        int.class));
                es = l.findStatic(c, "errorSums", MethodType.methodType(double[].class, float[].class,
                        float[].class, int.class, int.class, float.class));
                qr = l.findStatic(c, "quantizeRows", MethodType.methodType(void.class, float[].class, int.class,
                        int.class, int.class, boolean.class, float[].class, int[].class, byte[].class, short[].class,
                        float[].class, double[].class, double[].class));
            } catch (ReflectiveOperationException | LinkageError e) {
                mm = null;
                ma = null;
                es = null;
                qr = null;
            }
        }
        MIN_MAX = mm;
        MAX_ABS = ma;
        ERROR_SUMS = es;
        QUANTIZE_ROWS = qr;
    }

    private Lanes() {
    }

    /**
     * The class {@code name} (one of the Vector API kernels of this package) when the JVM runs with
     * {@code --add-modules jdk.incubator.vector} and the system property {@code rungbook.vector} is not
     * {@code false}; otherwise, or if it does not load, null (the callers then run their plain loops).
     */
    static Class<?> vectorClass(String name) {
        if (!ModuleLayer.boot().findModule("jdk.incubator.vector").isPresent()
                || "false".equals(System.getProperty("rungbook.vector"))) {
            return null;
        }
        try {
            return Class.forName(name);
        } catch (ReflectiveOperationException | LinkageError e) {
            return null;
        }
    }

    /** Rethrows what a vector method threw: unchecked throwables as they are (it declares no checked ones). */
    private static RuntimeException unchecked(Throwable e) {
        if (e instanceof RuntimeException) {
            return (RuntimeException) e;
        }
        if (e instanceof Error) {
            throw (Error) e;
        }
        return new IllegalStateException(e);
    }

    /** True when the reductions run on the Vector API (see the class comment). */
    public static boolean vectorised() {
        return MIN_MAX != null;
    }

    /**
     * {@code {min, max}} of {@code v[from, to)} together with the starting values {@code lo} and {@code hi} (pass
     * {@code +Infinity, -Infinity} for the plain range of the values, {@code 0, 0} for a range that contains 0). A
     * NaN in the values gives NaN.
     */
    public static float[] minMax(float[] v, int from, int to, float lo, float hi) {
        if (MIN_MAX != null) {
            try {
                return (float[]) MIN_MAX.invokeExact(v, from, to, lo, hi);
            } catch (Throwable e) {
                throw unchecked(e);
            }
        }
        return scalarMinMax(v, from, to, lo, hi);
    }

    /** {@link #minMax} as a plain loop (the fallback, and the reference for tests). */
    static float[] scalarMinMax(float[] v, int from, int to, float lo, float hi) {
        float mn = lo;
        float mx = hi;
        for (int i = from; i < to; i++) {
            float x = v[i];
            mn = Math.min(mn, x);
            mx = Math.max(mx, x);
        }
        return new float[] {mn, mx};
    }

    /** The largest {@code |v[i]|} over {@code [from, to)}, at least 0; NaN or infinite if a value is. */
    public static float maxAbs(float[] v, int from, int to) {
        if (MAX_ABS != null) {
            try {
                return (float) MAX_ABS.invokeExact(v, from, to);
            } catch (Throwable e) {
                throw unchecked(e);
            }
        }
        return scalarMaxAbs(v, from, to);
    }

    /** The Vector API form of {@code Fused.errorSums} (same results), or null on the scalar path. */
    static double[] vectorErrorSums(float[] w, float[] d, int from, int to, float inv) {
        if (ERROR_SUMS == null) {
            return null;
        }
        try {
            return (double[]) ERROR_SUMS.invokeExact(w, d, from, to, inv);
        } catch (Throwable e) {
            throw unchecked(e);
        }
    }

    /**
     * The Vector API form of {@code Fused}'s rows (same results; see {@code VectorLanes.quantizeRows}); false, doing
     * nothing, on the scalar path.
     */
    static boolean vectorQuantizeRows(float[] w, int rows, int cols, int bits, boolean symmetric, float[] scales,
            int[] zps, byte[] bytes, short[] shorts, float[] dq, double[] sqErr, double[] sqSignal) {
        if (QUANTIZE_ROWS == null) {
            return false;
        }
        try {
            QUANTIZE_ROWS.invokeExact(w, rows, cols, bits, symmetric, scales, zps, bytes, shorts, dq, sqErr,
                    sqSignal);
            return true;
        } catch (Throwable e) {
            throw unchecked(e);
        }
    }

    /** {@link #maxAbs} as a plain loop. */
    static float scalarMaxAbs(float[] v, int from, int to) {
        float m = 0f;
        for (int i = from; i < to; i++) {
            m = Math.max(m, Math.abs(v[i]));
        }
        return m;
    }
}
