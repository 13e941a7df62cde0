package dev.rungbook.plan;

import dev.rungbook.progress.Progress;
import java.util.ArrayList;
import java.util.Arrays;
import java.util.List;

/**
 * The exact size-versus-cost frontier of choosing one option per layer: a dynamic programme over layers whose states
 * are partial plans with their exact byte sums, keeping after each layer only the states no other state beats (no
 * more bytes and no more cost, one of them less). The final states are the Pareto frontier over every budget; the best
 * plan under a budget is the frontier state with the most bytes that still fit. Package-private.
 *
 * <p>When a layer leaves more than {@code stateLimit} states, they are thinned: the byte range is cut into
 * {@code stateLimit} buckets of equal width and each keeps its cheapest state. Byte sums stay exact (a plan that is
 * reported to fit does fit), but optimality is then only guaranteed up to the bucket width; {@link #exact()} says
 * whether this happened.
 */
final class ParetoDp {
    /** One frontier point: total bytes, total cost and the option chosen per layer. */
    record Point(long bytes, double cost, int[] choices) {
        @Override
        public int[] choices() {
            return choices.clone();
        }
    }

    private final List<Point> points;
    private final boolean exact;
    private final long bucketBytes;

    private ParetoDp(List<Point> points, boolean exact, long bucketBytes) {
        this.points = List.copyOf(points);
        this.exact = exact;
        this.bucketBytes = bucketBytes;
    }

    /**
     * Solves for {@code bytes[layer][option]} (negative: the option is not available for that layer) and
     * {@code cost[layer][option]} (finite where available).
     *
     * @throws IllegalArgumentException if the shapes differ, a layer has no option, or an available cost is not finite
     */
    static ParetoDp solve(long[][] bytes, double[][] cost, int stateLimit, Progress progress) {
        if (bytes.length != cost.length || bytes.length == 0) {
            throw new IllegalArgumentException("frontier: " + bytes.length + " layers of sizes and " + cost.length
                    + " of costs");
        }
        if (stateLimit < 1) {
            throw new IllegalArgumentException("frontier: state limit " + stateLimit + " must be positive");
        }
        int layers = bytes.length;
        // Per layer: the surviving states' bytes, cost, parent state (in the previous layer) and option.
        long[][] sb = new long[layers + 1][];
        double[][] sc = new double[layers + 1][];
        int[][] parent = new int[layers + 1][];
        int[][] option = new int[layers + 1][];
        sb[0] = new long[] {0};
        sc[0] = new double[] {0};
        boolean exact = true;
        long bucket = 1;
        for (int l = 0; l < layers; l++) {
            Progress.checkInterrupted("frontier");
            if (bytes[l].length != cost[l].length) {
                throw new IllegalArgumentException("frontier: layer " + l + " has " + bytes[l].length
                        + " sizes and " + cost[l].length + " costs");
            }
            int k = bytes[l].length;
            int prev = sb[l].length;
            long[] nb = new long[prev * k];
            double[] nc = new double[prev * k];
            int[] np = new int[prev * k];
            int[] no = new int[prev * k];
            int n = 0;
            for (int o = 0; o < k; o++) {
                if (bytes[l][o] < 0) {
                    continue;
                }
                if (!Double.isFinite(cost[l][o])) {
                    throw new IllegalArgumentException("frontier: layer " + l + " option " + o + " has cost "
                            + cost[l][o]);
                }
                for (int s = 0; s < prev; s++) {
                    nb[n] = Math.addExact(sb[l][s], bytes[l][o]);
                    nc[n] = sc[l][s] + cost[l][o];
                    np[n] = s;
                    no[n] = o;
                    n++;
                }
            }
            if (n == 0) {
                throw new IllegalArgumentException("frontier: layer " + l + " has no available option");
            }
            int[] keep = nonDominated(nb, nc, n);
            if (keep.length > stateLimit) {
                exact = false;
                long lo = nb[keep[0]];
                long hi = nb[keep[keep.length - 1]];
                long width = Math.max(1, (hi - lo) / stateLimit + 1);
                bucket = Math.max(bucket, width);
                keep = thin(keep, nb, lo, width);
            }
            sb[l + 1] = new long[keep.length];
            sc[l + 1] = new double[keep.length];
            parent[l + 1] = new int[keep.length];
            option[l + 1] = new int[keep.length];
            for (int i = 0; i < keep.length; i++) {
                sb[l + 1][i] = nb[keep[i]];
                sc[l + 1][i] = nc[keep[i]];
                parent[l + 1][i] = np[keep[i]];
                option[l + 1][i] = no[keep[i]];
            }
            progress.update("frontier", l + 1, layers, Double.NaN);
        }
        progress.finish("frontier");
        List<Point> out = new ArrayList<>();
        for (int i = 0; i < sb[layers].length; i++) {
            int[] choice = new int[layers];
            int s = i;
            for (int l = layers; l >= 1; l--) {
                choice[l - 1] = option[l][s];
                s = parent[l][s];
            }
            out.add(new Point(sb[layers][i], sc[layers][i], choice));
        }
        return new ParetoDp(out, exact, exact ? 1 : bucket);
    }

    /**
     * The indices of the non-dominated states of the first {@code n}, by increasing bytes (and strictly decreasing
     * cost); of states equal in both, the first generated is kept.
     */
    private static int[] nonDominated(long[] b, double[] c, int n) {
        Integer[] order = new Integer[n];
        for (int i = 0; i < n; i++) {
            order[i] = i;
        }
        Arrays.sort(order, (x, y) -> {
            int r = Long.compare(b[x], b[y]);
            if (r == 0) {
                r = Double.compare(c[x], c[y]);
            }
            return r != 0 ? r : Integer.compare(x, y);
        });
        int[] keep = new int[n];
        int m = 0;
        double best = Double.POSITIVE_INFINITY;
        for (int i : order) {
            if (c[i] < best) {
                keep[m++] = i;
                best = c[i];
            }
        }
        return Arrays.copyOf(keep, m);
    }

    /** Keeps the cheapest state of each bucket {@code [lo + j w, lo + (j+1) w)}; {@code keep} is a frontier. */
    private static int[] thin(int[] keep, long[] b, long lo, long w) {
        int[] out = new int[keep.length];
        int m = 0;
        for (int i = 0; i < keep.length; i++) {
            long bucket = (b[keep[i]] - lo) / w;
            boolean lastOfBucket = i + 1 == keep.length || (b[keep[i + 1]] - lo) / w != bucket;
            // Along a frontier cost falls as bytes grow, so the last state of a bucket is its cheapest.
            if (lastOfBucket) {
                out[m++] = keep[i];
            }
        }
        return Arrays.copyOf(out, m);
    }

    /** The frontier, by increasing bytes and strictly decreasing cost. */
    List<Point> points() {
        return points;
    }

    /** Whether no layer had to be thinned, so that {@link #best} is optimal. */
    boolean exact() {
        return exact;
    }

    /** The widest thinning bucket in bytes (1 when exact). */
    long bucketBytes() {
        return bucketBytes;
    }

    /** The cheapest plan whose bytes do not exceed {@code budget}, or null when even the smallest does not fit. */
    Point best(long budget) {
        Point out = null;
        for (Point p : points) {
            if (p.bytes() <= budget) {
                out = p;
            } else {
                break;
            }
        }
        return out;
    }
}
