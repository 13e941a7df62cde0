package dev.rungbook.internal;

import java.nio.ByteOrder;

import jdk.incubator.vector.ByteVector;
import jdk.incubator.vector.FloatVector;
import jdk.incubator.vector.IntVector;
import jdk.incubator.vector.ShortVector;
import jdk.incubator.vector.VectorMask;
import jdk.incubator.vector.VectorOperators;
import jdk.incubator.vector.VectorShuffle;
import jdk.incubator.vector.VectorSpecies;

/**
 * The run-of-segments kernels of {@link SegmentKernels} with the JDK's incubating Vector API. Loaded (by
 * {@link SegmentKernels}, through {@link Lanes#vectorClass}) only when the JVM runs with
 * {@code --add-modules jdk.incubator.vector}; nothing else may refer to this class. Internal.
 *
 * <p>Every lane does the float operations of the plain loops in {@link SegmentKernels} in the same order (a vector
 * division, addition or comparison is the IEEE operation of each lane), and the lanes that the plain loops would
 * redo in double (a linear quotient on a half-integer, a level quotient on a midpoint's float neighbour) are redone
 * here the same way, one lane at a time; so the codes and values are those of the plain loops bit for bit
 * ({@code SegmentKernelsTest} checks it). Minimum and maximum follow {@link Math#min}/{@link Math#max}, as in
 * {@link VectorLanes}, whose vector shape (the preferred one) this class keeps.
 */
final class VectorSegments {
    /** The reductions' vectors: the preferred shape, as {@link VectorLanes}'s reductions. */
    private static final VectorSpecies<Float> S = FloatVector.SPECIES_PREFERRED;
    private static final int L = S.length();
    private static final VectorSpecies<Integer> SI = IntVector.SPECIES_PREFERRED;
    /**
     * The arithmetic kernels' vectors: eight float lanes, the shape of {@code VectorLanes.errorSums}' arithmetic.
     * Vector API methods are shared code whose receiver profiles the JIT reads; a second shape of the same float
     * operations there made the JIT give up compiling the other kernels' vectors (measured: the error sums took 2.5x
     * as long in a JVM that also ran a preferred-shape form of the linear kernel).
     */
    private static final VectorSpecies<Float> A = FloatVector.SPECIES_256;
    private static final int AL = A.length();
    private static final VectorSpecies<Integer> AI = IntVector.SPECIES_256;
    private static final VectorSpecies<Byte> AB = ByteVector.SPECIES_64;
    private static final VectorSpecies<Short> AS = ShortVector.SPECIES_128;
    /** Whether the preferred vectors hold sixteen floats (AVX-512), which {@link #levels16} needs. */
    private static final boolean SIXTEEN_LANES = FloatVector.SPECIES_PREFERRED.length() >= 16;
    private static final float MAGIC = 12582912f; // 1.5 * 2^23, as in SegmentKernels
    private static final int MAGIC_BITS = Float.floatToRawIntBits(MAGIC);

    static {
        if (SI.length() != L) {
            throw new IllegalStateException("float and int vectors of different lane counts");
        }
    }

    private VectorSegments() {
    }

    /** The number of float lanes of the arithmetic kernels. */
    static int lanes() {
        return AL;
    }

    /**
     * {@code SegmentKernels.minMax} (the same results): floats compared as the integers
     * {@code b ^ ((b >> 31) & 0x7FFFFFFF)} of their bits, which order them as {@link Math#min} does (integer
     * reductions are cheaper than float ones, whose lanes must honour {@code -0.0} and NaN).
     */
    static void minMax(float[] w, int off, int count, int m, float[] lo, float[] hi) {
        int vend = m - m % L;
        for (int k = 0; k < count; k++) {
            int base = off + k * m;
            IntVector mn = IntVector.broadcast(SI, Integer.MAX_VALUE);
            IntVector mx = IntVector.broadcast(SI, Integer.MIN_VALUE);
            for (int j = 0; j < vend; j += L) {
                IntVector b = (IntVector) FloatVector.fromArray(S, w, base + j).reinterpretShape(SI, 0);
                IntVector key = b.lanewise(VectorOperators.ASHR, 31).and(0x7FFFFFFF).lanewise(VectorOperators.XOR, b);
                mn = mn.min(key);
                mx = mx.max(key);
            }
            int a = mn.reduceLanes(VectorOperators.MIN);
            int c = mx.reduceLanes(VectorOperators.MAX);
            float fa = vend == 0 ? Float.POSITIVE_INFINITY : Float.intBitsToFloat(a ^ ((a >> 31) & 0x7FFFFFFF));
            float fc = vend == 0 ? Float.NEGATIVE_INFINITY : Float.intBitsToFloat(c ^ ((c >> 31) & 0x7FFFFFFF));
            for (int i = base + vend; i < base + m; i++) {
                fa = Math.min(fa, w[i]);
                fc = Math.max(fc, w[i]);
            }
            lo[k] = fa;
            hi[k] = fc;
        }
    }

    /** {@code SegmentKernels.maxAbs} (the same results): magnitudes compared as their bit patterns. */
    static void maxAbs(float[] w, int off, int count, int m, float[] amax) {
        int vend = m - m % L;
        for (int k = 0; k < count; k++) {
            int base = off + k * m;
            IntVector mx = IntVector.zero(SI);
            for (int j = 0; j < vend; j += L) {
                mx = mx.max(((IntVector) FloatVector.fromArray(S, w, base + j).reinterpretShape(SI, 0)).and(0x7FFFFFFF));
            }
            int b = mx.reduceLanes(VectorOperators.MAX);
            for (int i = base + vend; i < base + m; i++) {
                b = Math.max(b, Float.floatToRawIntBits(w[i]) & 0x7FFFFFFF);
            }
            amax[k] = Float.intBitsToFloat(b);
        }
    }

    /**
     * {@code SegmentKernels.linear} over {@code count} segments of {@code m} values from {@code off}, segment
     * {@code k} with scale {@code scales[s0 + k]} and zero point {@code zeros[s0 + k]} (0 if {@code zeros} is null).
     * The integer code is read from the bits of {@code c + 1.5 * 2^23} (exact for {@code |c| < 2^22}), as Java 17's
     * Vector API has no float-to-int conversion the JIT compiles. On the side, {@code nextAmax[k]} gets the largest
     * magnitude of segment {@code k} of the next run (from {@code off + count * m}) for {@code k < nextCount}
     * ({@code nextCount <= count}): the next run's first pass, while its values come into the cache.
     */
    static int linear(float[] w, int off, int count, int m, float[] scales, float[] zeros, int s0, int qmin,
            int qmax, float[] deq, byte[] bytes, short[] shorts, int nextCount, float[] nextAmax) {
        int vend = m - m % AL;
        int redo = 0;
        int next = count * m; // from a segment to the same segment of the next run
        for (int k = 0; k < count; k++) {
            int base = off + k * m;
            float sc = scales[s0 + k];
            float z = zeros == null ? 0f : zeros[s0 + k];
            // two loops rather than a test in one: a vector that lives across a branch is boxed by the JIT
            if (k < nextCount) {
                IntVector mx = IntVector.zero(AI);
                for (int j = 0; j < vend; j += AL) {
                    mx = mx.max(magnitudeBits(w, base + next + j));
                    redo += linearLanes(w, base + j, sc, z, qmin, qmax, deq, bytes, shorts);
                }
                nextAmax[k] = maxAbsFinish(w, mx.reduceLanes(VectorOperators.MAX), base + next + vend,
                        base + next + m);
            } else {
                for (int j = 0; j < vend; j += AL) {
                    redo += linearLanes(w, base + j, sc, z, qmin, qmax, deq, bytes, shorts);
                }
            }
            if (vend < m) {
                redo += SegmentKernels.linear(w, base + vend, m - vend, sc, z, qmin, qmax, deq, bytes, shorts);
            }
        }
        return redo;
    }

    /** Eight lanes of {@link #linear} from {@code i}; returns the number of lanes redone in double. */
    private static int linearLanes(float[] w, int i, float sc, float z, int qmin, int qmax, float[] deq, byte[] bytes,
            short[] shorts) {
        FloatVector t = FloatVector.fromArray(A, w, i).div(sc);
        FloatVector r = t.add(MAGIC).sub(MAGIC);
        // a half-integer quotient (or one beyond 2^22, or infinite): the definition decides, in double
        // (d * d is below 0.25 exactly when |d| < 0.5: no float square of |d| <= 0.5 - 2^-25 rounds up to it)
        FloatVector d = t.sub(r);
        VectorMask<Float> tie = d.mul(d).compare(VectorOperators.LT, 0.25f).not();
        FloatVector c = r.add(z).min((float) qmax).max((float) qmin);
        IntVector ci = ((IntVector) c.add(MAGIC).reinterpretShape(AI, 0)).sub(MAGIC_BITS);
        if (bytes != null) {
            ((ByteVector) ci.convertShape(VectorOperators.I2B, AB, 0)).intoArray(bytes, i);
        } else {
            ((ShortVector) ci.convertShape(VectorOperators.I2S, AS, 0)).intoArray(shorts, i);
        }
        c.sub(z).mul(sc).intoArray(deq, i);
        if (tie.anyTrue()) {
            // the plain kernel on these lanes: it redoes the same ties in double
            return SegmentKernels.linear(w, i, AL, sc, z, qmin, qmax, deq, bytes, shorts);
        }
        return 0;
    }

    /** The magnitudes of eight floats from {@code i} as their bit patterns (which order as the magnitudes). */
    private static IntVector magnitudeBits(float[] w, int i) {
        return ((IntVector) FloatVector.fromArray(A, w, i).reinterpretShape(AI, 0)).and(0x7FFFFFFF);
    }

    /** The largest magnitude of {@code bits} (a magnitude's bit pattern) and of {@code w[from, to)}, as a float. */
    private static float maxAbsFinish(float[] w, int bits, int from, int to) {
        int b = bits;
        for (int i = from; i < to; i++) {
            b = Math.max(b, Float.floatToRawIntBits(w[i]) & 0x7FFFFFFF);
        }
        return Float.intBitsToFloat(b);
    }

    /**
     * {@code SegmentKernels.levels} over {@code count} segments of {@code m} values from {@code off}, segment
     * {@code k} with scale {@code scales[s0 + k]}.
     *
     * <p>The float quotient {@code y} picks a bucket {@code rint((y + 1) * B)} ({@code B = Levels.VECTOR_BUCKETS},
     * rounded through {@code + 1.5 * 2^23} as above; monotone in {@code y}), and each lane reads its bucket's code and
     * level from the table's vector buckets ({@code Levels.vectorEntries}, one 64-bit entry each). A bucket that
     * holds a midpoint's float neighbour has code -1, and its lanes are counted as the definition says, in double.
     * With AVX-512 and tables that allow it, the sixteen-lane kernel {@link #levels16} runs instead.
     * {@code nextCount} and {@code nextAmax} as for {@link #linear}.
     */
    static int levels(float[] w, int off, int count, int m, float[] scales, int s0, SegmentKernels.Levels table,
            float[] deq, byte[] bytes, int nextCount, float[] nextAmax) {
        return levels(w, off, count, m, scales, s0, table, deq, bytes, nextCount, nextAmax, null, null);
    }

    /**
     * {@link #levels(float[], int, int, int, float[], int, SegmentKernels.Levels, float[], byte[], int, float[])}
     * and, where {@code sqErr} or {@code sqSignal} is not null, the segments' error sums into them from index
     * {@code s0}, the same bits as {@code VectorLanes.segmentSums} (the sixteen-lane kernel forms them while a
     * segment's values are in the level-1 cache; the other paths call {@code segmentSums} after the run).
     */
    static int levels(float[] w, int off, int count, int m, float[] scales, int s0, SegmentKernels.Levels table,
            float[] deq, byte[] bytes, int nextCount, float[] nextAmax, double[] sqErr, double[] sqSignal) {
        if (SIXTEEN_LANES && table.permBase != null && m >= WL) {
            return levels16(w, off, count, m, scales, s0, table, deq, bytes, nextCount, nextAmax, sqErr, sqSignal);
        }
        int redo = levels8(w, off, count, m, scales, s0, table, deq, bytes, nextCount, nextAmax);
        if (sqErr != null || sqSignal != null) {
            VectorLanes.segmentSums(w, deq, off, count, m, scales, s0, sqErr, sqSignal);
        }
        return redo;
    }

    /** {@link #levels} with eight lanes, whatever the host and table (tests run it beside the kernel picked). */
    static int levels8(float[] w, int off, int count, int m, float[] scales, int s0, SegmentKernels.Levels table,
            float[] deq, byte[] bytes, int nextCount, float[] nextAmax) {
        float[] lanes = new float[AL];
        float[] scratch = new float[AL];
        int vend = m - m % AL;
        int redo = 0;
        int next = count * m;
        for (int k = 0; k < count; k++) {
            int base = off + k * m;
            float sc = scales[s0 + k];
            // two loops rather than a test in one, as in linear
            if (k < nextCount) {
                IntVector mx = IntVector.zero(AI);
                for (int j = 0; j < vend; j += AL) {
                    mx = mx.max(magnitudeBits(w, base + next + j));
                    redo += levelLanes(w, base + j, sc, table, deq, bytes, lanes);
                }
                nextAmax[k] = maxAbsFinish(w, mx.reduceLanes(VectorOperators.MAX), base + next + vend,
                        base + next + m);
            } else {
                for (int j = 0; j < vend; j += AL) {
                    redo += levelLanes(w, base + j, sc, table, deq, bytes, lanes);
                }
            }
            if (vend < m) {
                redo += SegmentKernels.levels(w, base + vend, m - vend, sc, table, deq, bytes, scratch);
            }
        }
        return redo;
    }

    /**
     * Eight lanes of {@link #levels} from {@code i} ({@code lanes}: scratch of eight); returns the lanes redone. The
     * buckets leave the vector as floats (bits {@code MAGIC_BITS + bucket}) with the 256-bit float store the other
     * kernels use, and each lane reads its entry on its own. Gathers would load 256-bit int index vectors with
     * {@code IntVector.fromArray}, which the integer forward pass calls on 512-bit ones; measured (2026-12-04, the
     * sample MLP's integer pass in a JVM that had first coded a 1024 x 1024 matrix to a 16-level codebook): 20-35 ms
     * after the gathers, against 1.4 ms after this form or with no quantizer run. An isolated loop of these lookups
     * measured (2026-12-03) 1.3x faster than the gathers, and equal inside the kernel.
     */
    private static int levelLanes(float[] w, int i, float sc, SegmentKernels.Levels table, float[] deq, byte[] bytes,
            float[] lanes) {
        FloatVector.fromArray(A, w, i).div(sc).add(1f).mul((float) SegmentKernels.Levels.VECTOR_BUCKETS).add(MAGIC)
                .intoArray(lanes, 0);
        int redo = 0;
        for (int l = 0; l < AL; l++) {
            long e = table.vectorEntries[Float.floatToRawIntBits(lanes[l]) - MAGIC_BITS];
            int code = (int) (e >> 32);
            if (code >= 0) {
                bytes[i + l] = (byte) code;
                deq[i + l] = Float.intBitsToFloat((int) e) * sc;
            } else { // a bucket with a midpoint's neighbour: the definition, in double
                code = SegmentKernels.count(table.mids, w[i + l] / (double) sc);
                bytes[i + l] = (byte) code;
                deq[i + l] = sc * table.levels[code];
                redo++;
            }
        }
        return redo;
    }

    /** Sixteen-lane vectors of {@link #levels16}: the preferred shape with AVX-512 (see {@link #levels16}). */
    private static final VectorSpecies<Float> W = FloatVector.SPECIES_512;
    private static final VectorSpecies<Integer> WI = IntVector.SPECIES_512;
    private static final VectorSpecies<Byte> WB = ByteVector.SPECIES_128;
    private static final int WL = W.length();
    /** Quotient distances from a threshold below which {@link #levels16} counts in double. */
    private static final int NEAR_BITS = Float.floatToRawIntBits(0x1p-21f);
    private static final ByteOrder ORDER = ByteOrder.nativeOrder();

    /**
     * {@link #levels} with sixteen lanes and in-register table lookups (a permutation of one vector by the lanes'
     * indices) instead of gathers, for tables with {@code Levels.permBase}; segments whose scale's reciprocal would
     * come near the ends of the float range take the eight-lane kernel. See {@code Levels.permBase} for why the codes
     * are the definition's.
     *
     * <p>The JIT reads one receiver-type profile per Vector API method, and a second vector class in it can turn
     * every vector of the code relying on it into an object (see {@link VectorForward}). So the 512-bit vectors here
     * call only what the library's other 512-bit code calls (float broadcast, load, fused multiply-add and
     * {@code intoByteArray}, as {@link VectorForward}; int load, and, add, shifts, comparisons and blends) and
     * permutations, which nothing else calls; never the float arithmetic or {@code intoArray} of the 256-bit kernels.
     * The values go out as bytes into {@code tmp} and move into {@code deq} with 256-bit loads and stores, as
     * {@link VectorForward}'s do. (Measured 2026-12-03, a JVM that ran the fused NF4 case first: the sample MLP's
     * integer pass took 24-25 ms after the eight-lane kernel's former gathers, whose 256-bit index loads the integer
     * pass's {@code IntVector.fromArray} profile then held, and 2.3 ms after this kernel.)
     */
    private static int levels16(float[] w, int off, int count, int m, float[] scales, int s0,
            SegmentKernels.Levels table, float[] deq, byte[] bytes, int nextCount, float[] nextAmax, double[] sqErr,
            double[] sqSignal) {
        maxAbs(w, off + count * m, nextCount, m, nextAmax); // the next run's first pass
        int vend = m - m % WL;
        byte[] tmp = new byte[4 * vend];
        float[] scratch = new float[m];
        boolean sums = sqErr != null || sqSignal != null;
        // the sums on the way out hold for one chunk of whole vectors (no tail), as segmentSums takes them
        boolean sumsOnTheWay = sums && vend == m && m <= VectorLanes.CHUNK;
        float[] lanes = new float[2 * AL];
        int redo = 0;
        for (int k = 0; k < count; k++) {
            int base = off + k * m;
            float sc = scales[s0 + k];
            if (!(sc >= 0x1p-100f && sc <= 0x1p100f)) { // a reciprocal near the ends of the float range
                redo += levels8(w, base, 1, m, scales, s0 + k, table, deq, bytes, 0, nextAmax);
                if (sums) {
                    VectorLanes.segmentSums(w, deq, base, 1, m, scales, s0 + k, sqErr, sqSignal);
                }
                continue;
            }
            float r = 1f / sc;
            int near = segment16(w, base, vend, r, sc, table, tmp, bytes);
            if (sumsOnTheWay && near == 0) {
                copyOutSums(tmp, deq, w, base, vend, sc, lanes, s0 + k, sqErr, sqSignal);
                continue;
            }
            copyOut(tmp, deq, base, vend);
            if (near != 0) { // a quotient near a threshold: the segment's codes by the definition
                redo += SegmentKernels.levels(w, base, vend, sc, table, deq, bytes, scratch);
            }
            if (vend < m) {
                redo += SegmentKernels.levels(w, base + vend, m - vend, sc, table, deq, bytes, scratch);
            }
            if (sums) {
                VectorLanes.segmentSums(w, deq, base, 1, m, scales, s0 + k, sqErr, sqSignal);
            }
        }
        return redo;
    }

    /**
     * Sixteen lanes of {@link #levels16} from {@code i} ({@code r = fl(1 / sc)}): codes into {@code bytes}, values as
     * bytes into {@code tmp} from {@code t}; returns 1 if a lane's quotient is near its threshold (the caller redoes
     * the segment), else 0. Small enough (under the JIT's 325 bytes for hot calls) to be compiled into the loop,
     * where the tables' loads and the broadcasts leave the loop.
     */
    private static int levelLanes16(float[] w, int i, float r, float sc, SegmentKernels.Levels table, byte[] tmp,
            int t, byte[] bytes) {
        FloatVector x = FloatVector.fromArray(W, w, i);
        // MAGIC + rint(x * fl(15 r) + 15), one rounding: the bucket in the low bits
        IntVector b = (IntVector) x.fma(FloatVector.broadcast(W, 15f * r), FloatVector.broadcast(W, 15f + MAGIC))
                .reinterpretShape(WI, 0);
        VectorShuffle<Integer> low = b.and(WL - 1).toShuffle();
        VectorMask<Integer> upper = b.and(WL).compare(VectorOperators.NE, 0);
        FloatVector threshold = (FloatVector) lookUp32(table.permThreshold, low, upper).reinterpretShape(W, 0);
        // fl(threshold - x * r), one rounding; its sign bit counts the threshold
        IntVector d = (IntVector) x.fma(FloatVector.broadcast(W, -r), threshold).reinterpretShape(WI, 0);
        IntVector code = lookUp32(table.permBase, low, upper).add(d.lanewise(VectorOperators.LSHR, 31));
        ((ByteVector) code.convertShape(VectorOperators.I2B, WB, 0)).intoByteArray(bytes, i, ORDER);
        // fl(level * sc): adding -0 keeps every product, signed zeros included
        ((FloatVector) IntVector.fromArray(WI, table.permLevels, 0).rearrange(code.toShuffle()).reinterpretShape(W, 0))
                .fma(FloatVector.broadcast(W, sc), FloatVector.broadcast(W, -0f)).intoByteArray(tmp, t, ORDER);
        return d.and(0x7FFFFFFF).compare(VectorOperators.LE, NEAR_BITS).anyTrue() ? 1 : 0;
    }

    /**
     * {@link #levelLanes16} over {@code vend} values from {@code base}; returns 1 if any lane was near a threshold.
     * This loop and {@link #copyOut} are methods of their own, compiled apart from {@link #levels16}'s other paths:
     * measured (2026-12-03), with both loops written in {@link #levels16} the fused NF4 case took 64-98 ms in a JVM
     * that had run the per-channel int8 kernel first (the JIT's log: the copy's 256-bit store no longer compiled to
     * a vector store) and 33-35 ms in one that had not; as methods of their own, 34-40 ms either way.
     */
    private static int segment16(float[] w, int base, int vend, float r, float sc, SegmentKernels.Levels table,
            byte[] tmp, byte[] bytes) {
        int near = 0;
        for (int j = 0; j < vend; j += WL) {
            near |= levelLanes16(w, base + j, r, sc, table, tmp, 4 * j, bytes);
        }
        return near;
    }

    /** The {@code n} floats of {@code tmp} (as bytes) into {@code deq} from {@code d}, with 256-bit vectors. */
    private static void copyOut(byte[] tmp, float[] deq, int d, int n) {
        for (int j = 0; j < n; j += AL) {
            FloatVector.fromByteArray(A, tmp, 4 * j, ORDER).intoArray(deq, d + j);
        }
    }

    /**
     * {@link #copyOut} of one segment of {@code n <= VectorLanes.CHUNK} values (a multiple of 8) from {@code d},
     * with its error sums into entry {@code s} of {@code sqErr} and {@code sqSignal} (either may be null): the
     * operations of {@code VectorLanes.segmentSums} in its order (eight float lanes, {@code (x - v) * inv} and
     * {@code x * inv} squared and added, the lanes added pairwise, times {@code sc^2} in double), so the same bits.
     * {@code lanes}: scratch of 16 floats.
     */
    private static void copyOutSums(byte[] tmp, float[] deq, float[] w, int d, int n, float sc, float[] lanes, int s,
            double[] sqErr, double[] sqSignal) {
        float inv = 1f / sc;
        FloatVector ve = FloatVector.zero(A);
        FloatVector vs = ve;
        for (int j = 0; j < n; j += AL) {
            FloatVector v = FloatVector.fromByteArray(A, tmp, 4 * j, ORDER);
            v.intoArray(deq, d + j);
            FloatVector x = FloatVector.fromArray(A, w, d + j);
            FloatVector dd = x.sub(v).mul(inv);
            FloatVector u = x.mul(inv);
            ve = ve.add(dd.mul(dd));
            vs = vs.add(u.mul(u));
        }
        ve.intoArray(lanes, 0);
        vs.intoArray(lanes, AL);
        double s2 = (double) sc * sc;
        if (sqErr != null) {
            sqErr[s] = VectorLanes.pairwise(lanes, 0) * s2;
        }
        if (sqSignal != null) {
            sqSignal[s] = VectorLanes.pairwise(lanes, AL) * s2;
        }
    }

    /** Entry {@code low + (upper ? 16 : 0)} of the 32-entry {@code table}, per lane. */
    private static IntVector lookUp32(int[] table, VectorShuffle<Integer> low, VectorMask<Integer> upper) {
        return IntVector.fromArray(WI, table, 0).rearrange(low).blend(IntVector.fromArray(WI, table, WL).rearrange(low),
                upper);
    }
}
