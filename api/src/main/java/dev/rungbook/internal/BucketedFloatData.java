package dev.rungbook.internal;

import java.util.Arrays;

/**
 * The codebook's large path on raw floats without sorting them all. Internal.
 *
 * <p>One pass files every value under a <em>fine bucket</em>: the top {@value #BUCKET_BITS} bits of its unsigned
 * order key (the key {@link FloatSort} sorts by), that is sign, exponent and the top 9 mantissa bits, so a bucket
 * spans 1/512 of a binade and bucket order is value order. Each bucket keeps its count and the sum and sum of
 * squares of its values' offsets from the bucket's lower magnitude edge (the value with the low 14 bits cleared), in
 * integer units of the bucket's ulp, so exactly. That gives exact prefix sums at every bucket edge (up to one
 * rounding each), which is all the compression and the program on bins need.
 *
 * <p>Lloyd steps and the windowed program also need sums at positions inside buckets. Those buckets are
 * <em>materialised</em> on demand: a pass over the data copies the values of the wanted buckets (and of their
 * neighbours for at least {@code SPAN} values each side, so that the next steps usually find theirs ready) into a pool, and each bucket's slice is
 * sorted with its running sums. On Gaussian-like data of 2^24 values and k = 16 a fit typically needs one such pass
 * and sorts under a million values, instead of the full sort. ({@code SPAN} was tuned for that: narrower margins
 * cost extra passes as the levels move, wider ones only sort more.)
 *
 * <p>The positions, values and sums are those of the fully sorted array (ascending, {@code -0.0} before
 * {@code +0.0}), so the large path computes the same partition as on {@link FloatSort}'s output, up to the
 * rounding of the sums.
 */
final class BucketedFloatData extends Codebook1D.Data {
    /** Bits of the order key that name a bucket. */
    static final int BUCKET_BITS = 18;
    private static final int LOW_BITS = 32 - BUCKET_BITS;
    private static final int BUCKETS = 1 << BUCKET_BITS;
    /** Clears the low mantissa bits below a bucket (toward zero in magnitude). */
    private static final int EDGE_MASK = -1 << LOW_BITS;
    /** Values of neighbouring buckets materialised, at least, on each side of a wanted one. */
    private static final int SPAN = 6 * Codebook1D.WINDOW;
    /** Values per chunk of the counting pass; {@link #PACK_SHIFT} leaves room for the sum below the count. */
    private static final int CHUNK = 1 << 24;
    private static final int PACK_SHIFT = 38;

    private final float[] x;
    /** Occupied bucket ids, ascending. */
    private final int[] ids;
    /** {@code pos[j]}: items in buckets before occupied bucket {@code j}; {@code pos[ids.length] == n}. */
    private final int[] pos;
    private final double[] ps;
    private final double[] pq;
    /** Start of occupied bucket {@code j}'s sorted values in the pool, or -1. */
    private final int[] poolStart;
    private float[] pool = new float[0];
    /** {@code cs[p + t]}, {@code cq[p + t]}: centred sum and square of a bucket's first {@code t + 1} values. */
    private double[] cs = new double[0];
    private double[] cq = new double[0];
    private int poolUsed;
    private int[] cursor;
    private int passes;

    private BucketedFloatData(float[] x, int[] ids, int[] pos, double[] ps, double[] pq, double mu) {
        super(x.length);
        this.x = x;
        this.ids = ids;
        this.pos = pos;
        this.ps = ps;
        this.pq = pq;
        this.mu = mu;
        this.poolStart = new int[ids.length];
        Arrays.fill(poolStart, -1);
    }

    /**
     * Whether {@code x} holds more than {@code limit} distinct values ({@code -0.0} and {@code +0.0} count as one),
     * by a hash set that stops as soon as it has seen {@code limit + 1} of them (on data with many distinct values,
     * after about {@code limit} items).
     */
    static boolean moreDistinctThan(float[] x, int limit) {
        int bits = 32 - Integer.numberOfLeadingZeros(4 * (limit + 1)); // load factor at most 1/4
        int size = 1 << bits;
        int[] table = new int[size];
        boolean zero = false;
        int distinct = 0;
        for (float v : x) {
            int b = Float.floatToRawIntBits(v);
            if (v == 0f) {
                if (!zero) {
                    zero = true;
                    distinct++;
                }
            } else {
                // 0 marks an empty slot; +0.0 (bits 0) and -0.0 are handled above
                int h = (b * 0x9E3779B9) >>> (32 - bits);
                while (table[h] != 0 && table[h] != b) {
                    h = (h + 1) & (size - 1);
                }
                if (table[h] == 0) {
                    table[h] = b;
                    distinct++;
                }
            }
            if (distinct > limit) {
                return true;
            }
        }
        return false;
    }

    /**
     * Files {@code x} under fine buckets with exact per-bucket sums, or returns {@code null} when the values occupy
     * fewer than {@code minBuckets} buckets (a narrow range: the large path's compression needs at least as many
     * blocks as bins, so such data go through the full sort).
     *
     * @throws IllegalArgumentException for a NaN or infinite value, naming its index
     */
    static BucketedFloatData of(float[] x, int minBuckets, String name) {
        int n = x.length;
        // Per bucket: count, sum of m and sum of m^2, where m = the low bits of the pattern, so that the offset from
        // the bucket's edge is m ulps. Integer sums are exact; count and sum share a long within chunks of 2^24
        // values (count < 2^25 above bit 38, sum < 2^38 below).
        int[] count = new int[BUCKETS];
        long[] sumM = new long[BUCKETS];
        long[] sumM2 = new long[BUCKETS];
        long[] packed = new long[BUCKETS];
        for (int from = 0; from < n; from += CHUNK) {
            accumulate(x, from, Math.min(n, from + CHUNK), packed, sumM2);
            for (int b = 0; b < BUCKETS; b++) {
                long c = packed[b];
                if (c != 0) {
                    count[b] += (int) (c >>> PACK_SHIFT);
                    sumM[b] += c & ((1L << PACK_SHIFT) - 1);
                    packed[b] = 0;
                }
            }
        }
        // Non-finite keys fill exactly the lowest and highest buckets (exponent field all ones).
        int finiteLo = FloatSort.key(Float.floatToRawIntBits(-Float.MAX_VALUE)) >>> LOW_BITS;
        int finiteHi = FloatSort.key(Float.floatToRawIntBits(Float.MAX_VALUE)) >>> LOW_BITS;
        int occupied = 0;
        for (int b = 0; b < BUCKETS; b++) {
            if (count[b] > 0) {
                occupied++;
                if (b < finiteLo || b > finiteHi) {
                    for (int i = 0; i < n; i++) {
                        if (!Float.isFinite(x[i])) {
                            throw new IllegalArgumentException(name + ": value at index " + i + " is " + x[i]);
                        }
                    }
                }
            }
        }
        if (occupied < minBuckets) {
            return null;
        }
        int[] ids = new int[occupied];
        int[] pos = new int[occupied + 1];
        int j = 0;
        int muBucket = -1;
        for (int b = 0; b < BUCKETS; b++) {
            if (count[b] > 0) {
                ids[j] = b;
                pos[j + 1] = pos[j] + count[b];
                if (muBucket < 0 && pos[j + 1] > n / 2) {
                    muBucket = b;
                }
                j++;
            }
        }
        double mu = edge(muBucket);
        // Centred prefix sums at bucket starts: with S, Q the sums of the offsets from the edge and
        // delta = edge - mu, sum (x - mu) = S + c delta and sum (x - mu)^2 = Q + 2 delta S + c delta^2.
        double[] ps = new double[occupied + 1];
        double[] pq = new double[occupied + 1];
        for (j = 0; j < occupied; j++) {
            int b = ids[j];
            float e = edge(b);
            int exponent = (Float.floatToRawIntBits(e) >>> 23) & 0xFF;
            double ulp = Math.scalb(1.0, Math.max(exponent, 1) - 150);
            double c = count[b];
            double s = Math.copySign(ulp, e) * sumM[b];
            double q = ulp * ulp * sumM2[b];
            double delta = e - mu;
            ps[j + 1] = ps[j] + (s + c * delta);
            pq[j + 1] = pq[j] + (q + 2 * delta * s + c * delta * delta);
        }
        return new BucketedFloatData(x, ids, pos, ps, pq, mu);
    }

    private static void accumulate(float[] x, int from, int to, long[] packed, long[] sumM2) {
        for (int i = from; i < to; i++) {
            int bits = Float.floatToRawIntBits(x[i]);
            int b = FloatSort.key(bits) >>> LOW_BITS;
            long m = bits & ~EDGE_MASK;
            packed[b] += (1L << PACK_SHIFT) + m;
            sumM2[b] += m * m;
        }
    }

    /** The lower magnitude edge of bucket {@code b}: any member's bit pattern with the low bits cleared. */
    private static float edge(int b) {
        return Float.intBitsToFloat(FloatSort.unkey(b << LOW_BITS) & EDGE_MASK);
    }

    /** Data passes run to materialise buckets (for tests and diagnostics). */
    int passes() {
        return passes;
    }

    /** Values held sorted in the pool (for tests and diagnostics). */
    int materialised() {
        return poolUsed;
    }

    @Override
    Codebook1D.Blocks blocks(int target) {
        double[] pw = new double[pos.length];
        for (int j = 0; j < pos.length; j++) {
            pw[j] = pos[j];
        }
        return new Codebook1D.Blocks(pos, pw, ps, pq);
    }

    /** Occupied bucket holding position {@code i} ({@code 0 <= i < n}); bucket starts ascend strictly. */
    private int bucketOf(int i) {
        int j = Arrays.binarySearch(pos, 0, ids.length, i);
        return j >= 0 ? j : -j - 2;
    }

    private int start(int j) {
        int p = poolStart[j];
        if (p < 0) {
            throw new IllegalStateException("bucket " + j + " was read before it was materialised");
        }
        return p;
    }

    @Override
    double value(int i) {
        int j = bucketOf(i);
        return pool[start(j) + i - pos[j]];
    }

    @Override
    double weight(int i) {
        return 1.0;
    }

    @Override
    void prefixAt(int i, double[] out) {
        out[0] = i;
        if (i >= n) {
            out[1] = ps[ids.length];
            out[2] = pq[ids.length];
            return;
        }
        int j = bucketOf(i);
        int t = i - pos[j];
        if (t == 0) {
            out[1] = ps[j];
            out[2] = pq[j];
            return;
        }
        int p = start(j);
        out[1] = ps[j] + cs[p + t - 1];
        out[2] = pq[j] + cq[p + t - 1];
    }

    /** Largest float {@code <= t}, with {@code -0.0} replaced by {@code +0.0} (both are {@code <= 0}). */
    private static float floorFloat(double t) {
        float f = (float) t;
        if (f > t) {
            f = Math.nextDown(f);
        }
        return f == 0f ? 0f : f;
    }

    /**
     * Where threshold {@code t} falls among the occupied buckets: {@code j >= 0} if occupied bucket {@code j} holds
     * the largest float {@code <= t}'s bucket (its values straddle {@code t}), else {@code -(j + 1)} with {@code j}
     * the first occupied bucket above {@code t} ({@code ids.length} if none).
     */
    private int locate(double t) {
        return Arrays.binarySearch(ids, FloatSort.key(Float.floatToRawIntBits(floorFloat(t))) >>> LOW_BITS);
    }

    @Override
    int upperBound(double t) {
        int j = locate(t);
        if (j < 0) {
            j = -j - 1;
            return j == ids.length ? n : pos[j]; // every value in the buckets before j is <= t, none after
        }
        int p = start(j);
        int lo = p;
        int hi = p + pos[j + 1] - pos[j];
        while (lo < hi) {
            int mid = (lo + hi) >>> 1;
            if (pool[mid] <= t) {
                lo = mid + 1;
            } else {
                hi = mid;
            }
        }
        return pos[j] + (lo - p);
    }

    @Override
    void prepareThresholds(double[] t) {
        boolean[] want = new boolean[ids.length];
        for (double v : t) {
            int j = locate(v);
            if (j >= 0 && poolStart[j] < 0) { // the buckets t falls in that are not yet readable, and margins
                int from = j;
                while (from > 0 && pos[j] - pos[from] < SPAN) {
                    from--;
                }
                int to = j;
                while (to < ids.length - 1 && pos[to + 1] - pos[j + 1] < SPAN) {
                    to++;
                }
                Arrays.fill(want, from, to + 1, true);
            }
        }
        materialise(want);
    }

    @Override
    void preparePositions(int[] lo, int[] hi) {
        boolean[] want = new boolean[ids.length];
        for (int m = 0; m < lo.length; m++) {
            if (lo[m] >= n) {
                continue;
            }
            int to = bucketOf(Math.min(hi[m], n - 1));
            for (int j = bucketOf(lo[m]); j <= to; j++) {
                // a window that is only a bucket's first position needs nothing inside the bucket
                want[j] |= !(pos[j] == lo[m] && lo[m] == hi[m]);
            }
        }
        materialise(want);
    }

    /**
     * One pass over the data copies the values of the wanted buckets not yet in the pool into it; each slice is then
     * sorted. No pass when there are none.
     */
    private void materialise(boolean[] want) {
        int add = 0;
        for (int j = 0; j < ids.length; j++) {
            if (want[j] && poolStart[j] < 0) {
                add += pos[j + 1] - pos[j];
            }
        }
        if (add == 0) {
            return;
        }
        long[] flagged = new long[BUCKETS / 64];
        if (cursor == null) {
            cursor = new int[BUCKETS];
        }
        int need = poolUsed + add;
        if (need > pool.length) {
            int cap = (int) Math.min(n, Math.max(need, 2L * pool.length));
            pool = Arrays.copyOf(pool, cap);
            cs = Arrays.copyOf(cs, cap);
            cq = Arrays.copyOf(cq, cap);
        }
        int at = poolUsed;
        for (int j = 0; j < ids.length; j++) {
            if (want[j] && poolStart[j] < 0) {
                int b = ids[j];
                flagged[b >>> 6] |= 1L << b;
                poolStart[j] = at;
                cursor[b] = at;
                at += pos[j + 1] - pos[j];
            }
        }
        collect(flagged);
        for (int j = 0; j < ids.length; j++) {
            int b = ids[j];
            if ((flagged[b >>> 6] & (1L << b)) == 0) {
                continue;
            }
            int p = poolStart[j];
            int end = p + pos[j + 1] - pos[j];
            FloatSort.sortRange(pool, p, end);
            double s = 0;
            double q = 0;
            for (int u = p; u < end; u++) {
                double y = pool[u] - mu;
                s += y;
                q += y * y;
                cs[u] = s;
                cq[u] = q;
            }
        }
        poolUsed = at;
        passes++;
    }

    private void collect(long[] flagged) {
        float[] v = x;
        float[] out = pool;
        int[] cur = cursor;
        for (int i = 0; i < v.length; i++) {
            int b = FloatSort.key(Float.floatToRawIntBits(v[i])) >>> LOW_BITS;
            if ((flagged[b >>> 6] & (1L << b)) != 0) {
                out[cur[b]++] = v[i];
            }
        }
    }
}
