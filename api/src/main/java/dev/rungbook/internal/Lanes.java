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
    private static final MethodHandle PAIR_SUMS;

    static {
        MethodHandle[] h = vectorMethods("dev.rungbook.internal.VectorLanes",
                "minMax", MethodType.methodType(float[].class, float[].class, int.class, int.class, float.class,
                        float.class),
                "maxAbs", MethodType.methodType(float.class, float[].class, int.class, int.class),
                "segmentSums", MethodType.methodType(void.class, float[].class, float[].class, int.class, int.class,
                        int.class, float[].class, int.class, double[].class, double[].class),
                "quantizeRows", MethodType.methodType(float.class, float[].class, int.class, int.class, int.class,
                        boolean.class, float[].class, int[].class, byte[].class, short[].class, float[].class,
                        double[].class, double[].class),
                "pairSums", MethodType.methodType(double[].class, float[].class, float[].class));
        MIN_MAX = h[0];
        MAX_ABS = h[1];
        ERROR_SUMS = h[2];
        QUANTIZE_ROWS = h[3];
        PAIR_SUMS = h[4];
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

    /**
     * Handles on static methods of the Vector API kernel class {@code className} ({@link #vectorClass}), one per
     * (name, {@link MethodType}) pair of {@code namesAndTypes}, in order. All or none: every entry is null when the
     * class is not usable or any of the methods cannot be found (the callers then run their plain loops).
     */
    static MethodHandle[] vectorMethods(String className, Object... namesAndTypes) {
        MethodHandle[] h = new MethodHandle[namesAndTypes.length / 2];
        Class<?> c = vectorClass(className);
        if (c == null) {
            return h;
        }
        try {
            MethodHandles.Lookup l = MethodHandles.lookup();
            for (int i = 0; i < h.length; i++) {
                h[i] = l.findStatic(c, (String) namesAndTypes[2 * i], (MethodType) namesAndTypes[2 * i + 1]);
            }
            return h;
        } catch (ReflectiveOperationException | LinkageError e) {
            return new MethodHandle[h.length];
        }
    }

    /** Rethrows what a vector method threw: unchecked throwables as they are (it declares no checked ones). */
    static RuntimeException unchecked(Throwable e) {
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

    /** The Vector API form of {@code Fused.segmentSums} (same results); false, doing nothing, on the scalar path. */
    static boolean vectorSegmentSums(float[] w, float[] d, int off, int count, int m, float[] scales, int s0,
            double[] sqErr, double[] sqSignal) {
        if (ERROR_SUMS == null) {
            return false;
        }
        try {
            ERROR_SUMS.invokeExact(w, d, off, count, m, scales, s0, sqErr, sqSignal);
            return true;
        } catch (Throwable e) {
            throw unchecked(e);
        }
    }

    /**
     * The Vector API form of {@code Fused}'s rows (same results; see {@code VectorLanes.quantizeRows}), returning
     * the largest {@code |x|}; -1, doing nothing, on the scalar path.
     */
    static float vectorQuantizeRows(float[] w, int rows, int cols, int bits, boolean symmetric, float[] scales,
            int[] zps, byte[] bytes, short[] shorts, float[] dq, double[] sqErr, double[] sqSignal) {
        if (QUANTIZE_ROWS == null) {
            return -1f;
        }
        try {
            return (float) QUANTIZE_ROWS.invokeExact(w, rows, cols, bits, symmetric, scales, zps, bytes, shorts, dq,
                    sqErr, sqSignal);
        } catch (Throwable e) {
            throw unchecked(e);
        }
    }

    /** The number of entries of {@link #pairSums}'s result. */
    public static final int PAIR_SUMS_LENGTH = 10;

    /**
     * The sums behind an error report of {@code y} against {@code x} (arrays of equal length), with {@code e = y - x}
     * in double: {@code {sum e^2, sum |e|, max |e|, sum x^2, sum y^2, sum x*y, min x, max x, min y, max y}}. The sums
     * are taken in double in four lanes: lane {@code j} adds the terms of the elements {@code i = j mod 4} of the
     * first {@code n - n mod 4} in order, then the last {@code n mod 4} elements go to lanes 0, 1, 2 in order, and
     * the lanes are added as {@code (l0 + l1) + (l2 + l3)}; four independent chains instead of one, so the loop is
     * not held up by the latency of its additions. Minimum and maximum compare with {@code <} and {@code >} (so
     * {@code -0.0} and {@code 0.0} are not told apart and NaN is never picked, callers check the sums for
     * finiteness); with no values they are {@code +Infinity, -Infinity, +Infinity, -Infinity}. With the Vector API
     * module the same order runs in four-lane double vectors, with the same results bit for bit.
     */
    public static double[] pairSums(float[] x, float[] y) {
        if (x.length != y.length) {
            throw new IllegalArgumentException("arrays of " + x.length + " and " + y.length + " values");
        }
        if (PAIR_SUMS != null) {
            try {
                return (double[]) PAIR_SUMS.invokeExact(x, y);
            } catch (Throwable e) {
                throw unchecked(e);
            }
        }
        return scalarPairSums(x, y);
    }

    /** {@link #pairSums} as plain loops (the fallback, and the reference for tests). */
    static double[] scalarPairSums(float[] x, float[] y) {
        double e0 = 0, e1 = 0, e2 = 0, e3 = 0;
        double a0 = 0, a1 = 0, a2 = 0, a3 = 0;
        double x0 = 0, x1 = 0, x2 = 0, x3 = 0;
        double y0 = 0, y1 = 0, y2 = 0, y3 = 0;
        double p0 = 0, p1 = 0, p2 = 0, p3 = 0;
        double m = 0;
        float xlo = Float.POSITIVE_INFINITY;
        float xhi = Float.NEGATIVE_INFINITY;
        float ylo = Float.POSITIVE_INFINITY;
        float yhi = Float.NEGATIVE_INFINITY;
        int n = x.length;
        int body = n - n % 4;
        for (int i = 0; i < body; i += 4) {
            float a = x[i];
            float b = y[i];
            xlo = a < xlo ? a : xlo;
            xhi = a > xhi ? a : xhi;
            ylo = b < ylo ? b : ylo;
            yhi = b > yhi ? b : yhi;
            double e = (double) b - a;
            double ae = Math.abs(e);
            e0 += e * e;
            a0 += ae;
            m = ae > m ? ae : m;
            x0 += (double) a * a;
            y0 += (double) b * b;
            p0 += (double) a * b;
            a = x[i + 1];
            b = y[i + 1];
            xlo = a < xlo ? a : xlo;
            xhi = a > xhi ? a : xhi;
            ylo = b < ylo ? b : ylo;
            yhi = b > yhi ? b : yhi;
            e = (double) b - a;
            ae = Math.abs(e);
            e1 += e * e;
            a1 += ae;
            m = ae > m ? ae : m;
            x1 += (double) a * a;
            y1 += (double) b * b;
            p1 += (double) a * b;
            a = x[i + 2];
            b = y[i + 2];
            xlo = a < xlo ? a : xlo;
            xhi = a > xhi ? a : xhi;
            ylo = b < ylo ? b : ylo;
            yhi = b > yhi ? b : yhi;
            e = (double) b - a;
            ae = Math.abs(e);
            e2 += e * e;
            a2 += ae;
            m = ae > m ? ae : m;
            x2 += (double) a * a;
            y2 += (double) b * b;
            p2 += (double) a * b;
            a = x[i + 3];
            b = y[i + 3];
            xlo = a < xlo ? a : xlo;
            xhi = a > xhi ? a : xhi;
            ylo = b < ylo ? b : ylo;
            yhi = b > yhi ? b : yhi;
            e = (double) b - a;
            ae = Math.abs(e);
            e3 += e * e;
            a3 += ae;
            m = ae > m ? ae : m;
            x3 += (double) a * a;
            y3 += (double) b * b;
            p3 += (double) a * b;
        }
        double[] le = {e0, e1, e2, e3};
        double[] la = {a0, a1, a2, a3};
        double[] lx = {x0, x1, x2, x3};
        double[] ly = {y0, y1, y2, y3};
        double[] lp = {p0, p1, p2, p3};
        for (int i = body, j = 0; i < n; i++, j++) {
            float a = x[i];
            float b = y[i];
            xlo = a < xlo ? a : xlo;
            xhi = a > xhi ? a : xhi;
            ylo = b < ylo ? b : ylo;
            yhi = b > yhi ? b : yhi;
            double e = (double) b - a;
            double ae = Math.abs(e);
            le[j] += e * e;
            la[j] += ae;
            m = ae > m ? ae : m;
            lx[j] += (double) a * a;
            ly[j] += (double) b * b;
            lp[j] += (double) a * b;
        }
        return new double[] {lanes(le), lanes(la), m, lanes(lx), lanes(ly), lanes(lp), xlo, xhi, ylo, yhi};
    }

    /** The four lanes of a {@link #pairSums} sum, added in its order. */
    static double lanes(double[] l) {
        return (l[0] + l[1]) + (l[2] + l[3]);
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
