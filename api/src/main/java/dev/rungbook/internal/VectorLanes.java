package dev.rungbook.internal;

import java.util.Arrays;
import jdk.incubator.vector.ByteVector;
import jdk.incubator.vector.DoubleVector;
import jdk.incubator.vector.FloatVector;
import jdk.incubator.vector.IntVector;
import jdk.incubator.vector.ShortVector;
import jdk.incubator.vector.VectorOperators;
import jdk.incubator.vector.VectorSpecies;

/**
 * The reductions of {@link Lanes} with the JDK's incubating Vector API. Loaded (by {@link Lanes}) only when the JVM
 * runs with {@code --add-modules jdk.incubator.vector}; nothing else may refer to this class. Internal.
 *
 * <p>Lane-wise {@code min}/{@code max} and their reductions follow {@link Math#min}/{@link Math#max} ({@code -0.0}
 * below {@code 0.0}, NaN wins), and a minimum or maximum does not depend on the order of the values, so the results
 * are those of the scalar loops bit for bit ({@code LanesTest} checks it).
 */
final class VectorLanes {
    /** The shape of every float vector here (and in the other kernels): 256 bits. */
    private static final VectorSpecies<Float> S = FloatVector.SPECIES_256;

    /** Eight lanes, as the fixed summation order of {@code Fused.scalarErrorSums} has. */
    private static final VectorSpecies<Float> S8 = FloatVector.SPECIES_256;
    /** Values per chunk of {@link #segmentSums} (as {@code Fused}'s). */
    static final int CHUNK = 64;

    private VectorLanes() {
    }

    /**
     * The eight floats of {@code a} from {@code i} added pairwise:
     * {@code ((a0 + a1) + (a2 + a3)) + ((a4 + a5) + (a6 + a7))}.
     */
    static float pairwise(float[] a, int i) {
        return ((a[i] + a[i + 1]) + (a[i + 2] + a[i + 3])) + ((a[i + 4] + a[i + 5]) + (a[i + 6] + a[i + 7]));
    }

    /**
     * {@code Fused.segmentSums} with eight-lane vectors: per segment, lane {@code j} adds the values {@code j mod 8}
     * of each chunk in order, exactly as the scalar partial sums of {@code Fused.scalarErrorSums} do, and the lanes
     * are combined in the same pairwise order; the same bits.
     */
    static void segmentSums(float[] w, float[] d, int off, int count, int m, float[] scales, int s0, double[] sqErr,
            double[] sqSignal) {
        float[] le = new float[8];
        float[] ls = new float[8];
        for (int k = 0; k < count; k++) {
            int from = off + k * m;
            int to = from + m;
            float sc = scales[s0 + k];
            float inv = 1f / sc;
            double e = 0;
            double s = 0;
            for (int c = from; c < to; c += CHUNK) {
                int stop = Math.min(to, c + CHUNK);
                FloatVector ve = FloatVector.zero(S8);
                FloatVector vs = FloatVector.zero(S8);
                int i = c;
                for (; i + 8 <= stop; i += 8) {
                    FloatVector x = FloatVector.fromArray(S8, w, i);
                    FloatVector dd = x.sub(FloatVector.fromArray(S8, d, i)).mul(inv);
                    FloatVector u = x.mul(inv);
                    ve = ve.add(dd.mul(dd));
                    vs = vs.add(u.mul(u));
                }
                ve.intoArray(le, 0);
                vs.intoArray(ls, 0);
                for (int j = 0; i < stop; i++, j++) {
                    float dd = (w[i] - d[i]) * inv;
                    float u = w[i] * inv;
                    le[j] += dd * dd;
                    ls[j] += u * u;
                }
                e += pairwise(le, 0);
                s += pairwise(ls, 0);
            }
            double s2 = (double) sc * sc;
            if (sqErr != null) {
                sqErr[s0 + k] = e * s2;
            }
            if (sqSignal != null) {
                sqSignal[s0 + k] = s * s2;
            }
        }
    }

    private static final float MAGIC = 12582912f; // 1.5 * 2^23, as in Fused
    private static final int MAGIC_BITS = Float.floatToRawIntBits(MAGIC);

    /**
     * {@code Fused.quantizeRows} with eight-lane vectors, the same bits as its plain loops. Each row takes one pass
     * that rounds, clamps, narrows and stores the codes, stores the dequantized values, adds the error and signal
     * sums in the order of {@link #segmentSums} and, on the side, takes the min/max of the next row, whose load from
     * memory then overlaps this row's arithmetic (a minimum or maximum does not depend on the order of the values).
     * Only the first row has a pass of its own for its min/max. Returns the largest {@code |x|}.
     *
     * <p>Where the plain loops round with {@code (v + MAGIC) - MAGIC} and clamp in float, this pass reads the
     * rounded integer from the bits of {@code v + MAGIC} (for {@code |v| < 2^22} they are {@code MAGIC}'s plus the
     * integer), adds the zero point and clamps in int lanes, and gets the float code back by the same trick in
     * reverse: exact integers throughout, so the same codes and, from them, the same dequantized floats. (Java 17's
     * compiler has no fast float-to-int lane conversion, and its float lane min/max are several instructions each.)
     */
    static float quantizeRows(float[] w, int rows, int cols, int bits, boolean symmetric, float[] scales, int[] zps,
            byte[] bytes, short[] shorts, float[] dq, double[] sqErr, double[] sqSignal) {
        float amax = 0f;
        int ihi = (1 << (bits - 1)) - 1;
        int ilo = symmetric ? -ihi : -ihi - 1;
        float[] mm = minMax(w, 0, cols, 0f, 0f);
        float[] le = new float[8];
        float[] ls = new float[8];
        float[] nmn = new float[8];
        float[] nmx = new float[8];
        for (int r = 0; r < rows; r++) {
            int off = r * cols;
            float scale = Fused.rowParams(w, off, cols, r, bits, symmetric, mm[0], mm[1], scales, zps);
            amax = Math.max(amax, Math.max(-mm[0], mm[1]));
            int z = zps[r];
            float zp = z;
            float inv = 1f / scale;
            // the next row is read at index i + ahead; on the last row it reads its own values again, unused
            int ahead = r + 1 < rows ? cols : 0;
            Arrays.fill(nmn, 0f);
            Arrays.fill(nmx, 0f);
            float tmn = 0f;
            float tmx = 0f;
            double e = 0;
            double s = 0;
            int to = off + cols;
            for (int c = off; c < to; c += CHUNK) {
                int stop = Math.min(to, c + CHUNK);
                FloatVector ve = FloatVector.zero(S8);
                FloatVector vs = FloatVector.zero(S8);
                // the next row's running min/max live in arrays between chunks: a vector carried around the outer
                // loop would be boxed by the compiler
                FloatVector mn = FloatVector.fromArray(S8, nmn, 0);
                FloatVector mx = FloatVector.fromArray(S8, nmx, 0);
                int i = c;
                for (; i + 8 <= stop; i += 8) {
                    FloatVector x = FloatVector.fromArray(S8, w, i);
                    FloatVector y = FloatVector.fromArray(S8, w, i + ahead);
                    mn = mn.min(y);
                    mx = mx.max(y);
                    IntVector q = ((IntVector) x.div(scale).add(MAGIC).viewAsIntegralLanes()).add(z - MAGIC_BITS)
                            .max(ilo).min(ihi);
                    if (bytes != null) {
                        ((ByteVector) q.convertShape(VectorOperators.I2B, ByteVector.SPECIES_64, 0))
                                .intoArray(bytes, i);
                    } else {
                        ((ShortVector) q.convertShape(VectorOperators.I2S, ShortVector.SPECIES_128, 0))
                                .intoArray(shorts, i);
                    }
                    // (code - zp) as an exact float, then times the scale: the plain loops' (t - zp) * scale
                    FloatVector d = ((FloatVector) q.add(MAGIC_BITS - z).viewAsFloatingLanes()).sub(MAGIC).mul(scale);
                    d.intoArray(dq, i);
                    FloatVector dd = x.sub(d).mul(inv);
                    FloatVector u = x.mul(inv);
                    ve = ve.add(dd.mul(dd));
                    vs = vs.add(u.mul(u));
                }
                mn.intoArray(nmn, 0);
                mx.intoArray(nmx, 0);
                ve.intoArray(le, 0);
                vs.intoArray(ls, 0);
                for (int j = 0; i < stop; i++, j++) {
                    float x = w[i];
                    float y = w[i + ahead];
                    tmn = Math.min(tmn, y);
                    tmx = Math.max(tmx, y);
                    float t = Math.max((float) ilo, Math.min((float) ihi, ((x / scale + MAGIC) - MAGIC) + zp));
                    if (bytes != null) {
                        bytes[i] = (byte) (int) t;
                    } else {
                        shorts[i] = (short) (int) t;
                    }
                    float d = (t - zp) * scale;
                    dq[i] = d;
                    float dd = (x - d) * inv;
                    float u = x * inv;
                    le[j] += dd * dd;
                    ls[j] += u * u;
                }
                e += pairwise(le, 0);
                s += pairwise(ls, 0);
            }
            double s2 = (double) scale * scale;
            if (sqErr != null) {
                sqErr[r] = e * s2;
            }
            if (sqSignal != null) {
                sqSignal[r] = s * s2;
            }
            mm[0] = Math.min(tmn, FloatVector.fromArray(S8, nmn, 0).reduceLanes(VectorOperators.MIN));
            mm[1] = Math.max(tmx, FloatVector.fromArray(S8, nmx, 0).reduceLanes(VectorOperators.MAX));
        }
        return amax;
    }

    private static final VectorSpecies<Double> D4 = DoubleVector.SPECIES_256;

    /**
     * {@code Lanes.pairSums} with four-lane double vectors: each group of four values is widened to doubles and
     * its terms go to lanes 0..3 of the accumulators, exactly as the plain loop's four partial sums take them (the
     * products and differences are the same double operations, multiply then add, never fused). The floats are
     * loaded eight at a time, in the 256-bit shape the other kernels use (a second float shape in the JIT's
     * profiles of the shared Vector API methods can make it box vectors; see {@code VectorForward}), and widened
     * half by half: the lower half of the load at {@code i}, then the lower half of a second load at
     * {@code i + 4}. Minimum and maximum are compare-and-blend, as the plain loop's {@code <} and {@code >}.
     */
    static double[] pairSums(float[] x, float[] y) {
        int n = x.length;
        DoubleVector e2 = DoubleVector.zero(D4);
        DoubleVector ea = e2;
        DoubleVector em = e2;
        DoubleVector xx = e2;
        DoubleVector yy = e2;
        DoubleVector xy = e2;
        FloatVector xlo = FloatVector.broadcast(S8, Float.POSITIVE_INFINITY);
        FloatVector xhi = FloatVector.broadcast(S8, Float.NEGATIVE_INFINITY);
        FloatVector ylo = xlo;
        FloatVector yhi = xhi;
        int i = 0;
        // the upper four values are widened from a second load at i + 4 (its lower half), not by converting part 1:
        // the JDK's part conversion builds a float shuffle, and the first one loaded deoptimised the NF4 level
        // kernel, whose compiled rearranges had taken Int512Shuffle for the only shuffle class (measured 2026-12-03:
        // fused NF4 34 ms before an error report, 57 ms after); hence i + 12, not i + 8
        for (; i + 12 <= n; i += 8) {
            FloatVector fa = FloatVector.fromArray(S8, x, i);
            FloatVector fb = FloatVector.fromArray(S8, y, i);
            xlo = xlo.blend(fa, fa.lt(xlo));
            xhi = xhi.blend(fa, fa.compare(VectorOperators.GT, xhi));
            ylo = ylo.blend(fb, fb.lt(ylo));
            yhi = yhi.blend(fb, fb.compare(VectorOperators.GT, yhi));
            // values i .. i + 3, then i + 4 .. i + 7: lane j takes value i + j, then i + 4 + j
            DoubleVector a = (DoubleVector) fa.convertShape(VectorOperators.F2D, D4, 0);
            DoubleVector b = (DoubleVector) fb.convertShape(VectorOperators.F2D, D4, 0);
            DoubleVector e = b.sub(a);
            DoubleVector ae = e.abs();
            e2 = e2.add(e.mul(e));
            ea = ea.add(ae);
            em = em.blend(ae, ae.compare(VectorOperators.GT, em));
            xx = xx.add(a.mul(a));
            yy = yy.add(b.mul(b));
            xy = xy.add(a.mul(b));
            a = (DoubleVector) FloatVector.fromArray(S8, x, i + 4).convertShape(VectorOperators.F2D, D4, 0);
            b = (DoubleVector) FloatVector.fromArray(S8, y, i + 4).convertShape(VectorOperators.F2D, D4, 0);
            e = b.sub(a);
            ae = e.abs();
            e2 = e2.add(e.mul(e));
            ea = ea.add(ae);
            em = em.blend(ae, ae.compare(VectorOperators.GT, em));
            xx = xx.add(a.mul(a));
            yy = yy.add(b.mul(b));
            xy = xy.add(a.mul(b));
        }
        double[] le = e2.toArray();
        double[] la = ea.toArray();
        double[] lx = xx.toArray();
        double[] ly = yy.toArray();
        double[] lp = xy.toArray();
        double m = 0;
        for (double v : em.toArray()) {
            m = v > m ? v : m;
        }
        float mnx = Float.POSITIVE_INFINITY;
        float mxx = Float.NEGATIVE_INFINITY;
        float mny = Float.POSITIVE_INFINITY;
        float mxy = Float.NEGATIVE_INFINITY;
        float[] vxlo = xlo.toArray();
        float[] vxhi = xhi.toArray();
        float[] vylo = ylo.toArray();
        float[] vyhi = yhi.toArray();
        for (int k = 0; k < 8; k++) {
            mnx = vxlo[k] < mnx ? vxlo[k] : mnx;
            mxx = vxhi[k] > mxx ? vxhi[k] : mxx;
            mny = vylo[k] < mny ? vylo[k] : mny;
            mxy = vyhi[k] > mxy ? vyhi[k] : mxy;
        }
        // the rest (fewer than 12): i is a multiple of 4, and so is the plain loop's tail start n - n % 4, so value
        // k goes to lane k mod 4 either way
        for (; i < n; i++) {
            int j = i & 3;
            float a = x[i];
            float b = y[i];
            mnx = a < mnx ? a : mnx;
            mxx = a > mxx ? a : mxx;
            mny = b < mny ? b : mny;
            mxy = b > mxy ? b : mxy;
            double e = (double) b - a;
            double ae = Math.abs(e);
            le[j] += e * e;
            la[j] += ae;
            m = ae > m ? ae : m;
            lx[j] += (double) a * a;
            ly[j] += (double) b * b;
            lp[j] += (double) a * b;
        }
        return new double[] {Lanes.lanes(le), Lanes.lanes(la), m, Lanes.lanes(lx), Lanes.lanes(ly), Lanes.lanes(lp),
            mnx, mxx, mny, mxy};
    }

    static float[] minMax(float[] v, int from, int to, float lo, float hi) {
        FloatVector mn = FloatVector.broadcast(S, lo);
        FloatVector mx = FloatVector.broadcast(S, hi);
        int i = from;
        for (int bound = from + S.loopBound(to - from); i < bound; i += S.length()) {
            FloatVector x = FloatVector.fromArray(S, v, i);
            mn = mn.min(x);
            mx = mx.max(x);
        }
        float a = mn.reduceLanes(VectorOperators.MIN);
        float b = mx.reduceLanes(VectorOperators.MAX);
        for (; i < to; i++) {
            a = Math.min(a, v[i]);
            b = Math.max(b, v[i]);
        }
        return new float[] {a, b};
    }

    static float maxAbs(float[] v, int from, int to) {
        FloatVector mx = FloatVector.zero(S);
        int i = from;
        for (int bound = from + S.loopBound(to - from); i < bound; i += S.length()) {
            mx = mx.max(FloatVector.fromArray(S, v, i).abs());
        }
        float b = mx.reduceLanes(VectorOperators.MAX);
        for (; i < to; i++) {
            b = Math.max(b, Math.abs(v[i]));
        }
        return b;
    }
}
