package dev.rungbook.internal;

import jdk.incubator.vector.FloatVector;
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
    private static final VectorSpecies<Float> S = FloatVector.SPECIES_PREFERRED;

    /** Eight lanes, as the fixed summation order of {@code Fused.errorSums} has. */
    private static final VectorSpecies<Float> S8 = FloatVector.SPECIES_256;
    private static final int CHUNK = 64;

    private VectorLanes() {
    }

    /**
     * {@code Fused.errorSums} with eight-lane vectors: lane {@code j} adds the values {@code j mod 8} of each chunk
     * in order, exactly as the scalar partial sums do, and the lanes are combined in the same pairwise order.
     */
    static double[] errorSums(float[] w, float[] d, int from, int to, float inv) {
        double e = 0;
        double s = 0;
        float[] le = new float[8];
        float[] ls = new float[8];
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
            e += ((le[0] + le[1]) + (le[2] + le[3])) + ((le[4] + le[5]) + (le[6] + le[7]));
            s += ((ls[0] + ls[1]) + (ls[2] + ls[3])) + ((ls[4] + ls[5]) + (ls[6] + ls[7]));
        }
        return new double[] {e, s};
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
