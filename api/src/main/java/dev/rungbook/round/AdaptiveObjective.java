package dev.rungbook.round;

import dev.rungbook.internal.FloatPow;
import dev.rungbook.internal.LinearAlgebra;
import java.util.stream.IntStream;

/**
 * The adaptive-rounding objective on a row-major weight {@code W} ({@code rows x cols}), its gradient with respect to
 * the rounding variables {@code V}, and the fused Adam step. Package-private; driven by {@link AdaptiveRounding}.
 *
 * <p>Per weight, with scale {@code s}, zero point {@code z} and {@code base = floor(w / s + z)}:
 * {@code h(V) = clip(sigmoid(V) (zeta - gamma) + gamma, 0, 1)}, the soft code {@code clamp(base + h(V), qmin, qmax)}
 * and the soft weight {@code W~ = s (code - z)}. On a batch of samples {@code x} (rows of the calibration inputs):
 * <pre>
 *   loss = (1/B) sum_x || f(W~ x + b) - f(W x + b) ||^2  +  lambda sum (1 - |2 h(V) - 1|^beta)
 * </pre>
 * the regulariser only when asked (not during warm-up). Clamps and clips pass no gradient outside their range.
 *
 * <p>Layout of the work: per step the two products over the whole batch run as single calls (native BLAS runs
 * them on its own threads as it sees fit; several concurrent calls made its threads contend), then the weight rows,
 * cut into blocks of a fixed size that depends only on the layer's shape ({@link #blockRows}, never on the number of
 * threads), get one pass each over their weights in chunks of {@link #CHUNK} that stay in the core's cache:
 * {@code h}, {@code dh/dV}, the regulariser and its gradient, the Adam update, the sigmoid of the new {@code V} and
 * the next soft weight. Blocks run in parallel; their partial sums are added in block order, so a run gives the same
 * bits on any number of cores. The per-weight state (sigmoid, soft-weight coefficients, Adam moments) is stored
 * chunk by chunk, because Java 17's JIT vectorises a loop only when every array in it is indexed by the loop
 * variable alone.
 *
 * <p>Arithmetic: float32 in short branch-free loops that Java 17's JIT vectorises (a loop with too much in it is not
 * unrolled and runs scalar, where {@link Math#min}/{@link Math#max} are slow). Sums over weights (regulariser,
 * undecided count) go into one float accumulator per chunk position, added up per block in double, because the JIT
 * does not vectorise reductions. The sigmoid is a polynomial within {@code 4e-7} of the double-precision value; the
 * power {@code |2h - 1|^(beta - 1)} comes from {@link FloatPow} (relative error below {@code 1e-5}).
 */
final class AdaptiveObjective {
    static final double ZETA = 1.1;
    static final double GAMMA = -0.1;

    /** Weights per unit of work of the element loops (their arrays stay in the core's first-level cache). */
    static final int CHUNK = 1024;
    /** Weights per block of rows of the element pass, at least. */
    private static final int BLOCK_WEIGHTS = 1 << 16;
    /** The clamp on V before the sigmoid: beyond ln 11 = 2.398 the rectified sigmoid is clipped to 0 or 1 anyway. */
    private static final float V_CLAMP = 2.45f;
    /** Turns a positive margin of at least one float32 step at these magnitudes into 1 (see {@link #chunk}). */
    private static final float STEEP = 0x1p40f;
    /** Gradients below this magnitude enter Adam as 0 (see {@link #chunk}). */
    private static final float GRAD_FLUSH = 1e-18f;
    /** Adam moments below this magnitude are set to 0 (see {@link #chunk}). */
    private static final float MOMENT_FLUSH = 1e-28f;
    private static final float FLUSH_STEEP = 0x1p100f;
    private static final float ZG = (float) (ZETA - GAMMA);
    private static final float G = (float) GAMMA;

    final int rows;
    final int cols;
    final int n;
    private final LinearAlgebra la;
    private final float[] x;
    private final float[] target;
    private final float[] bias;
    private final Calibration.Activation act;
    private final float[] base;
    private final float[] scale;
    private final float[] zero;
    private final int qmin;
    private final int qmax;
    private final double lambda;

    // Per chunk (chunk-major, so that every element loop indexes all its arrays by the loop variable alone, which
    // Java 17's JIT needs to vectorise): the soft weight is off + mul * h, mul = s where the code can move, else 0;
    // sigmoid(V) of the last prepare/step; Adam's moments.
    private final int[] chunkFrom;
    private final int[] chunkLen;
    private final float[][] off;
    private final float[][] mul;
    private final float[][] sig;
    private float[][] m1;
    private float[][] m2;
    // Flat, for the products: the soft weight and the gradient with respect to it.
    private final float[] soft;
    private final float[] gw;
    private final int blockRows;
    private final Block[] blocks;
    private float[] xb = new float[0];
    private float[] yb = new float[0];
    private double regSum;
    private long undecidedCount;

    /** Scratch and partial sums of one block of rows. */
    private static final class Block {
        final int r0;
        final int r1;
        final int c0;
        final int c1;
        final float[] vl = new float[CHUNK];
        final float[] gl = new float[CHUNK];
        final float[] sl = new float[CHUNK];
        final float[] dh = new float[CHUNK];
        final float[] hh = new float[CHUNK];
        final float[] gr = new float[CHUNK];
        final float[] ta = new float[CHUNK];
        final float[] q = new float[CHUNK];
        final float[] s1 = new float[CHUNK];
        final float[] s2 = new float[CHUNK];
        final float[] accU = new float[CHUNK];
        final float[] accR = new float[CHUNK];
        double reg;
        long undecided;

        Block(int r0, int r1, int c0, int c1) {
            this.r0 = r0;
            this.r1 = r1;
            this.c0 = c0;
            this.c1 = c1;
        }
    }

    /** The Adam settings of one step, or null for a gradient only. */
    static final class AdamStep {
        final float k1;
        final float k2;

        /**
         * Step number {@code t >= 1} with learning rate {@code lr}: {@code v -= (lr / c1) m / (sqrt(s) / sqrt(c2) +
         * eps)} with {@code c1 = 1 - 0.9^t}, {@code c2 = 1 - 0.999^t} (bias corrections folded into two constants).
         */
        AdamStep(int t, double lr) {
            this.k1 = (float) (lr / (1 - Math.pow(0.9, t)));
            this.k2 = (float) (1 / Math.sqrt(1 - Math.pow(0.999, t)));
        }
    }

    /**
     * @param w the weight (not modified)
     * @param x the calibration inputs, {@code n x cols} (not modified)
     * @param bias one value per row, or null
     */
    AdaptiveObjective(LinearAlgebra la, float[] w, int rows, int cols, float[] x, int n, float[] bias,
            Calibration.Activation act, GridAssignment grid, double lambda) {
        this.la = la;
        this.rows = rows;
        this.cols = cols;
        this.n = n;
        this.x = x;
        this.bias = bias;
        this.act = act;
        this.lambda = lambda;
        this.qmin = grid.qmin();
        this.qmax = grid.qmax();
        int size = rows * cols;
        scale = new float[size];
        zero = new float[size];
        base = new float[size];
        for (int e = 0; e < size; e++) {
            int seg = grid.segmentOf(e);
            scale[e] = grid.scale(seg);
            zero[e] = grid.zeroPoint(seg);
            base[e] = (float) Math.floor(w[e] / (double) scale[e] + zero[e]);
        }
        blockRows = blockRows(rows, cols);
        int nb = (rows + blockRows - 1) / blockRows;
        blocks = new Block[nb];
        int chunks = 0;
        for (int b = 0; b < nb; b++) {
            int r0 = b * blockRows;
            int r1 = Math.min(rows, r0 + blockRows);
            int c = (int) (((long) (r1 - r0) * cols + CHUNK - 1) / CHUNK);
            blocks[b] = new Block(r0, r1, chunks, chunks + c);
            chunks += c;
        }
        chunkFrom = new int[chunks];
        chunkLen = new int[chunks];
        off = new float[chunks][];
        mul = new float[chunks][];
        sig = new float[chunks][];
        for (Block bk : blocks) {
            int end = bk.r1 * cols;
            for (int c = bk.c0; c < bk.c1; c++) {
                int from = bk.r0 * cols + (c - bk.c0) * CHUNK;
                int len = Math.min(CHUNK, end - from);
                chunkFrom[c] = from;
                chunkLen[c] = len;
                off[c] = new float[len];
                mul[c] = new float[len];
                sig[c] = new float[len];
                for (int j = 0; j < len; j++) {
                    int e = from + j;
                    // clamp(base + h, qmin, qmax) with h in [0, 1] is base + h inside the range, else a constant.
                    if (base[e] >= qmin && base[e] + 1 <= qmax) {
                        off[c][j] = scale[e] * (base[e] - zero[e]);
                        mul[c][j] = scale[e];
                    } else {
                        off[c][j] = scale[e] * ((base[e] < qmin ? qmin : qmax) - zero[e]);
                        mul[c][j] = 0f;
                    }
                }
            }
        }
        soft = new float[size];
        gw = new float[size];
        target = outputs(w, x, n);
    }

    /** Rows per block: at least {@link #BLOCK_WEIGHTS} weights, at most all rows. */
    static int blockRows(int rows, int cols) {
        long r = (BLOCK_WEIGHTS + cols - 1) / Math.max(1, cols);
        return (int) Math.max(1, Math.min(rows, r));
    }

    /** {@code f(X W^T + b)} for the given row-major weights over all {@code n} samples ({@code n x rows}). */
    float[] outputs(float[] weights, float[] inputs, int count) {
        float[] y = new float[count * rows];
        la.sgemm(false, true, count, rows, cols, inputs, weights, y);
        for (int i = 0; i < count; i++) {
            for (int o = 0; o < rows; o++) {
                double pre = y[i * rows + o] + (bias == null ? 0.0 : bias[o]);
                y[i * rows + o] = (float) act.apply(pre);
            }
        }
        return y;
    }

    /** The initial {@code V}: {@code h(V)} equals the fractional part {@code w / s + z - base}. */
    float[] initialV(float[] w) {
        float[] v = new float[w.length];
        for (int e = 0; e < w.length; e++) {
            double frac = w[e] / (double) scale[e] + zero[e] - base[e];
            frac = Math.min(Math.max(frac, 0.0), 1.0);
            double p = (frac - GAMMA) / (ZETA - GAMMA); // in [1/12, 11/12]
            v[e] = (float) Math.log(p / (1 - p));
        }
        return v;
    }

    static double rectified(double v) {
        double sig = 1.0 / (1.0 + Math.exp(-v));
        return Math.min(1.0, Math.max(0.0, sig * (ZETA - GAMMA) + GAMMA));
    }

    /** Hard codes from {@code V}: up where {@code h(V) >= 0.5}, clamped to the code range. */
    int[] hardCodes(float[] v) {
        int[] c = new int[v.length];
        for (int e = 0; e < v.length; e++) {
            double code = base[e] + (rectified(v[e]) >= 0.5 ? 1 : 0);
            c[e] = (int) Math.max(qmin, Math.min(qmax, code));
        }
        return c;
    }

    /** The codes rounded down ({@code floor(w / s + z)}), clamped to the code range. */
    int[] downCodes() {
        int[] c = new int[base.length];
        for (int e = 0; e < base.length; e++) {
            c[e] = (int) Math.max(qmin, Math.min(qmax, base[e]));
        }
        return c;
    }

    /** The code range. */
    int qmin() {
        return qmin;
    }

    /** The code range. */
    int qmax() {
        return qmax;
    }

    /** The weights that codes stand for. */
    float[] values(int[] codes) {
        float[] w = new float[codes.length];
        for (int e = 0; e < codes.length; e++) {
            w[e] = (float) ((double) scale[e] * (codes[e] - (double) zero[e]));
        }
        return w;
    }

    /** {@code w / s + z} of weight {@code e}, in double. */
    double scaledWeight(int e, float w) {
        return w / (double) scale[e] + zero[e];
    }

    /** The value of one code of weight {@code e}, in double. */
    double value(int e, int code) {
        return (double) scale[e] * (code - (double) zero[e]);
    }

    /** The mean over all samples of {@code ||f(W~ x + b) - f(W x + b)||^2} for the weights {@code w}. */
    double fullError(float[] w) {
        float[] y = outputs(w, x, n);
        double s = 0;
        for (int i = 0; i < y.length; i++) {
            double d = y[i] - (double) target[i];
            s += d * d;
        }
        return s / n;
    }

    /**
     * Sets the state for {@code v}: {@code sigmoid(V)} and the soft weight, the same loops as the end of a step.
     * A step needs it once before the first one; each step leaves the state of its updated {@code V}.
     */
    void prepare(float[] v) {
        for (Block bk : blocks) {
            for (int c = bk.c0; c < bk.c1; c++) {
                System.arraycopy(v, chunkFrom[c], bk.vl, 0, chunkLen[c]);
                sigmoidAndSoft(bk, c);
            }
        }
    }

    /** Starts Adam from zero moments. */
    void resetMoments() {
        m1 = new float[sig.length][];
        m2 = new float[sig.length][];
        for (int c = 0; c < sig.length; c++) {
            m1[c] = new float[chunkLen[c]];
            m2[c] = new float[chunkLen[c]];
        }
    }

    /**
     * {@code sigmoid(V)} of chunk {@code c} (V in the block's {@code vl}) into {@link #sig} and the soft weight into
     * {@link #soft}. {@code sigmoid(V) = 1 / (1 + e^-V)} with {@code e^-V = (e^(-V/8))^8} and {@code e^u} for
     * {@code |u| <= 0.31} by its Taylor polynomial of degree 7 (truncation below {@code 2e-9}); in float32 the
     * rectified sigmoid is within {@code 4e-7} of the double-precision value (measured over {@code |V| <= 2.4}).
     */
    private void sigmoidAndSoft(Block bk, int c) {
        int len = chunkLen[c];
        float[] vl = bk.vl;
        float[] sg = sig[c];
        for (int j = 0; j < len; j++) {
            float u = Math.max(-V_CLAMP, Math.min(V_CLAMP, vl[j])) * -0.125f;
            float p = 1f + u * (1f + u * (1f / 2 + u * (1f / 6 + u * (1f / 24 + u * (1f / 120 + u * (1f / 720
                    + u * (1f / 5040)))))));
            p = p * p;
            p = p * p;
            p = p * p;
            sg[j] = 1f / (1f + p);
        }
        float[] of = off[c];
        float[] mu = mul[c];
        float[] sl = bk.sl;
        for (int j = 0; j < len; j++) {
            sl[j] = of[j] + mu[j] * Math.max(0f, Math.min(1f, sg[j] * ZG + G));
        }
        System.arraycopy(sl, 0, soft, chunkFrom[c], len);
    }

    /**
     * The loss on the batch {@code idx[0, count)} and its gradient with respect to {@code v} (written to
     * {@code grad}); {@code regularise} adds the rounding regulariser with exponent {@code beta}. The same code as
     * {@link #step}, without the update.
     */
    double lossAndGradient(float[] v, int[] idx, int count, double beta, boolean regularise, float[] grad) {
        prepare(v);
        return run(v, idx, count, beta, regularise, grad, null);
    }

    /**
     * One Adam step on {@code v} (in place) for the batch {@code idx[0, count)}; returns the loss before the step.
     * The state must be that of {@code v} ({@link #prepare} before the first step).
     */
    double step(float[] v, int[] idx, int count, double beta, boolean regularise, AdamStep adam) {
        return run(v, idx, count, beta, regularise, null, adam);
    }

    private double run(float[] v, int[] idx, int count, double beta, boolean regularise, float[] grad,
            AdamStep adam) {
        if (xb.length < count * cols) {
            xb = new float[count * cols];
        }
        for (int i = 0; i < count; i++) {
            System.arraycopy(x, idx[i] * cols, xb, i * cols, cols);
        }
        if (yb.length < count * rows) {
            yb = new float[count * rows];
        }
        la.sgemm(false, true, count, rows, cols, 1f, xb, 0, cols, soft, 0, cols, 0f, yb, 0, rows);
        double rec = 0;
        double g = 2.0 / count;
        for (int i = 0; i < count; i++) {
            int t = idx[i] * rows;
            for (int o = 0; o < rows; o++) {
                double pre = yb[i * rows + o] + (bias == null ? 0.0 : bias[o]);
                double out = act.apply(pre);
                double d = out - target[t + o];
                rec += d * d;
                yb[i * rows + o] = (float) (g * d * act.slope(pre)); // now dLoss/dY~
            }
        }
        rec /= count;
        // dLoss/dW~ = G^T Xb  (rows x cols)
        la.sgemm(true, false, rows, cols, count, 1f, yb, 0, rows, xb, 0, cols, 0f, gw, 0, cols);
        float p = (float) (beta - 1);
        float regScale = (float) (-2 * lambda * beta);
        if (blocks.length == 1) {
            block(blocks[0], v, regularise, p, regScale, grad, adam);
        } else {
            IntStream.range(0, blocks.length).parallel()
                    .forEach(b -> block(blocks[b], v, regularise, p, regScale, grad, adam));
        }
        double reg = 0;
        long und = 0;
        for (Block bk : blocks) {
            reg += bk.reg;
            und += bk.undecided;
        }
        undecidedCount = und;
        if (regularise) {
            regSum = reg;
        }
        return rec + (regularise ? lambda * reg : 0.0);
    }

    /** The element pass over one block of rows. */
    private void block(Block bk, float[] v, boolean regularise, float p, float regScale, float[] grad,
            AdamStep adam) {
        java.util.Arrays.fill(bk.accU, 0f);
        java.util.Arrays.fill(bk.accR, 0f);
        for (int c = bk.c0; c < bk.c1; c++) {
            chunk(bk, c, v, regularise, p, regScale, grad, adam);
        }
        double reg = 0;
        double und = 0;
        for (int j = 0; j < CHUNK; j++) {
            reg += bk.accR[j];
            und += bk.accU[j];
        }
        bk.reg = reg;
        bk.undecided = (long) und;
    }

    /**
     * Weights {@code [from, to)}: from {@code sigmoid(V)} the rectified {@code h}, {@code dh/dV} and the soft
     * weight's derivative {@code mul dh/dV}, without branches: the mask "0 < h_raw < 1" is
     * {@code clamp(2^40 * margin, 0, 1)}, exactly 0 or 1 because every non-zero margin of these float32 values exceeds
     * {@code 2^-40}. Then the undecided count ({@code h} not within {@code 1e-3} of 0 or 1, the same mask), the
     * gradient of the products, the regulariser {@code 1 - a^beta} with {@code a = |2h - 1|} and its gradient
     * {@code -2 lambda beta sign(2h - 1) a^(beta - 1) dh/dV}, and either the gradient out or the Adam update with
     * the next state.
     */
    private void chunk(Block bk, int c, float[] v, boolean regularise, float p, float regScale, float[] grad,
            AdamStep adam) {
        int from = chunkFrom[c];
        int len = chunkLen[c];
        float[] sg = sig[c];
        float[] mu = mul[c];
        float[] gl = bk.gl;
        float[] dh = bk.dh;
        float[] hh = bk.hh;
        float[] gr = bk.gr;
        float[] accU = bk.accU;
        System.arraycopy(gw, from, gl, 0, len);
        for (int j = 0; j < len; j++) {
            float s = sg[j];
            float raw = s * ZG + G;
            hh[j] = Math.max(0f, Math.min(1f, raw));
            dh[j] = ZG * s * (1f - s) * Math.max(0f, Math.min(1f, STEEP * Math.min(raw, 1f - raw)));
        }
        final float lo = 1e-3f;
        final float hi = 1 - 1e-3f;
        for (int j = 0; j < len; j++) {
            accU[j] += Math.max(0f, Math.min(1f, STEEP * Math.min(hh[j] - lo, hi - hh[j])));
        }
        for (int j = 0; j < len; j++) {
            gr[j] = gl[j] * (mu[j] * dh[j]);
        }
        if (regularise) {
            float[] ta = bk.ta;
            float[] q = bk.q;
            float[] accR = bk.accR;
            for (int j = 0; j < len; j++) {
                ta[j] = Math.abs(2f * hh[j] - 1f);
            }
            FloatPow.pow(ta, p, q, len, bk.s1, bk.s2);
            for (int j = 0; j < len; j++) {
                accR[j] += 1f - ta[j] * q[j];
            }
            for (int j = 0; j < len; j++) {
                // sign(2h - 1), exactly -1, 0 or 1 (a non-zero 2h - 1 is at least 2^-24 here)
                float sign = Math.max(-1f, Math.min(1f, STEEP * (2f * hh[j] - 1f)));
                gr[j] += regScale * sign * q[j] * dh[j];
            }
        }
        if (adam == null) {
            System.arraycopy(gr, 0, grad, from, len);
            return;
        }
        final float b1 = 0.9f;
        final float b2 = 0.999f;
        final float eps = 1e-8f;
        float[] a1 = m1[c];
        float[] a2 = m2[c];
        float k1 = adam.k1;
        float k2 = adam.k2;
        float[] vl = bk.vl;
        System.arraycopy(v, from, vl, 0, len);
        // Flush to zero: gradients below 1e-18 (their square would be subnormal) and moments below 1e-28 (a decided
        // weight's first moment decays by 0.9 per step and, unflushed, sticks at the smallest subnormal, where every
        // operation costs the processor a slow assist). Such values move V by less than lr * 1e-10 per step through
        // Adam's eps = 1e-8. The masks are exactly 0 or 1, or a taper that keeps the product normal.
        for (int j = 0; j < len; j++) {
            float gi = gr[j];
            gr[j] = gi * Math.max(0f, Math.min(1f, (Math.abs(gi) - GRAD_FLUSH) * FLUSH_STEEP));
        }
        for (int j = 0; j < len; j++) {
            float gi = gr[j];
            float a = b1 * a1[j] + (1 - b1) * gi;
            float b = b2 * a2[j] + (1 - b2) * gi * gi;
            a1[j] = a * Math.max(0f, Math.min(1f, (Math.abs(a) - MOMENT_FLUSH) * FLUSH_STEEP));
            a2[j] = b * Math.max(0f, Math.min(1f, (b - MOMENT_FLUSH) * FLUSH_STEEP));
        }
        for (int j = 0; j < len; j++) {
            vl[j] -= k1 * a1[j] / ((float) Math.sqrt(a2[j]) * k2 + eps);
        }
        System.arraycopy(vl, 0, v, from, len);
        sigmoidAndSoft(bk, c);
    }

    /** Share of {@code h} values (from the last call) not within {@code 1e-3} of 0 or 1. */
    double undecidedShare() {
        int size = rows * cols;
        return size == 0 ? 0 : (double) undecidedCount / size;
    }

    /** The regulariser sum (without lambda) of the last call that regularised. */
    double lastRegulariser() {
        return regSum;
    }
}
