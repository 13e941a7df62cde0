package dev.rungbook.round;

import dev.rungbook.internal.LinearAlgebra;
import java.util.stream.IntStream;

/**
 * The adaptive-rounding objective on a row-major weight {@code W} ({@code rows x cols}) and its gradient with
 * respect to the rounding variables {@code V}. Package-private; driven by {@link AdaptiveRounding}.
 *
 * <p>Per weight, with scale {@code s}, zero point {@code z} and {@code base = floor(w / s + z)}:
 * {@code h(V) = clip(sigmoid(V) (zeta - gamma) + gamma, 0, 1)}, the soft code {@code clamp(base + h(V), qmin, qmax)}
 * and the soft weight {@code W~ = s (code - z)}. On a batch of samples {@code x} (rows of the calibration inputs):
 * <pre>
 *   loss = (1/B) sum_x || f(W~ x + b) - f(W x + b) ||^2  +  lambda sum (1 - |2 h(V) - 1|^beta)
 * </pre>
 * the regulariser only when asked (not during warm-up). Clamps and clips pass no gradient outside their range.
 */
final class AdaptiveObjective {
    static final double ZETA = 1.1;
    static final double GAMMA = -0.1;

    final int rows;
    final int cols;
    final int n;
    private final LinearAlgebra la;
    private final float[] x;
    private final float[] target;
    private final float[] bias;
    private final Calibration.Activation act;
    private final float[] scale;
    private final float[] zero;
    private final float[] base;
    private final int qmin;
    private final int qmax;
    private final double lambda;

    // Work arrays, reused across calls.
    final float[] h;
    private final float[] soft;
    private final float[] dSoft;
    private final float[] dReg;
    private final float[] dH;
    private final float[] gw;
    private float[] xb = new float[0];
    private float[] yb = new float[0];
    private double regSum;
    private long undecidedCount;

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
        h = new float[size];
        soft = new float[size];
        dSoft = new float[size];
        dReg = new float[size];
        dH = new float[size];
        gw = new float[size];
        target = outputs(w, x, n);
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

    /** The weights that codes stand for. */
    float[] values(int[] codes) {
        float[] w = new float[codes.length];
        for (int e = 0; e < codes.length; e++) {
            w[e] = (float) ((double) scale[e] * (codes[e] - (double) zero[e]));
        }
        return w;
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

    /** Weights per unit of work of the element loops (their arrays stay in the core's cache between loops). */
    static final int CHUNK = 4096;
    /** The clamp on V before the sigmoid: beyond ln 11 = 2.398 the rectified sigmoid is clipped to 0 or 1 anyway. */
    private static final float V_CLAMP = 2.45f;
    /** Turns a positive margin of at least one float32 step at these magnitudes into 1 (see {@link #softChunk}). */
    private static final float STEEP = 0x1p40f;

    /**
     * For weights {@code [from, to)}: {@code h(V)}, the soft weight, {@code dh/dV} (into {@link #dH}) and the soft
     * weight's derivative {@code s dh/dV} where the code is inside its range (else 0), without branches: the
     * masks "0 < h_raw < 1" and "qmin <= code <= qmax" are {@code clamp(2^40 * margin (+ 1), 0, 1)}, which is
     * exactly 0 or 1 because every non-zero margin of these float32 values exceeds {@code 2^-40}.
     *
     * <p>{@code sigmoid(V) = 1 / (1 + e^-V)} with {@code e^-V = (e^(-V/8))^8} and {@code e^u} for {@code |u| <=
     * 0.31} by its Taylor polynomial of degree 7 (truncation below {@code 2e-9}); in float32 the rectified sigmoid
     * is within {@code 4e-7} of the double-precision value (measured over {@code |V| <= 2.4}).
     */
    private void softChunk(float[] v, int from, int to, float qlo, float qhi) {
        // Four short loops rather than one long one: the JIT vectorises each of them (a single loop with all of
        // this is too large for it and runs scalar, where Math.min/max are slow). dH holds the sigmoid in between.
        final float zg = (float) (ZETA - GAMMA);
        final float g = (float) GAMMA;
        for (int e = from; e < to; e++) {
            float u = Math.max(-V_CLAMP, Math.min(V_CLAMP, v[e])) * -0.125f;
            float p = 1f + u * (1f + u * (1f / 2 + u * (1f / 6 + u * (1f / 24 + u * (1f / 120 + u * (1f / 720
                    + u * (1f / 5040)))))));
            p = p * p;
            p = p * p;
            p = p * p;
            dH[e] = 1f / (1f + p);
        }
        for (int e = from; e < to; e++) {
            float sig = dH[e];
            float raw = sig * zg + g;
            h[e] = Math.max(0f, Math.min(1f, raw));
            dH[e] = zg * sig * (1f - sig) * Math.max(0f, Math.min(1f, STEEP * Math.min(raw, 1f - raw)));
        }
        for (int e = from; e < to; e++) {
            soft[e] = scale[e] * (Math.max(qlo, Math.min(qhi, base[e] + h[e])) - zero[e]);
        }
        for (int e = from; e < to; e++) {
            float code = base[e] + h[e];
            dSoft[e] = scale[e] * dH[e] * Math.max(0f, Math.min(1f, STEEP * Math.min(code - qlo, qhi - code) + 1f));
        }
    }

    /**
     * The regulariser {@code sum (1 - |2h - 1|^beta)} over {@code [from, to)} and its gradient
     * {@code -lambda beta |2h - 1|^(beta - 1) sign(2h - 1) 2 dh/dV} into {@link #dReg} ({@code regScale = -2 lambda
     * beta}), the power read from {@code power}.
     */
    private double regulariserChunk(int from, int to, float[] power, float regScale) {
        // The table look-up keeps this loop scalar; four partial sums keep the additions off one dependency chain.
        double r0 = 0;
        double r1 = 0;
        double r2 = 0;
        double r3 = 0;
        float knots = POWER_KNOTS;
        int e = from;
        for (; e + 3 < to; e += 4) {
            r0 += regulariserTerm(e, power, knots, regScale);
            r1 += regulariserTerm(e + 1, power, knots, regScale);
            r2 += regulariserTerm(e + 2, power, knots, regScale);
            r3 += regulariserTerm(e + 3, power, knots, regScale);
        }
        for (; e < to; e++) {
            r0 += regulariserTerm(e, power, knots, regScale);
        }
        return (r0 + r1) + (r2 + r3);
    }

    /** {@code 1 - |2h - 1|^beta} of weight {@code e}; its gradient into {@link #dReg}. */
    private float regulariserTerm(int e, float[] power, float knots, float regScale) {
        float t = 2 * h[e] - 1;
        float a = Math.abs(t);
        float pos = a * knots;
        int i = Math.min((int) pos, POWER_KNOTS - 1);
        float lo = power[i];
        float p1 = lo + (pos - i) * (power[i + 1] - lo);
        dReg[e] = regScale * Math.copySign(p1, t) * dH[e];
        return 1 - a * p1;
    }

    /** As {@link #regulariserChunk} with the power {@code a^p} ({@code 0 <= p < 1}) by exp and log. */
    private double exactRegulariserChunk(int from, int to, double p, float regScale) {
        double rs = 0;
        for (int e = from; e < to; e++) {
            double t = 2.0 * h[e] - 1;
            double a = Math.abs(t);
            double p1 = a == 0 ? 0.0 : Math.exp(p * Math.log(a));
            rs += 1 - a * p1;
            dReg[e] = (float) (regScale * Math.copySign(p1, t) * dH[e]);
        }
        return rs;
    }

    /**
     * The number of {@code h} values in {@code [from, to)} not within {@code 1e-3} of 0 or 1, counted without
     * branches: {@code clamp(2^40 * min(h - 0.001, 0.999 - h), 0, 1)} is exactly 1 for those and 0 for the others
     * (a positive margin here is at least one float32 step near 0.001, about {@code 1e-10}).
     */
    private long undecided(int from, int to) {
        final float lo = 1e-3f;
        final float hi = 1 - 1e-3f;
        float u0 = 0;
        float u1 = 0;
        int e = from;
        for (; e + 1 < to; e += 2) {
            u0 += Math.max(0f, Math.min(1f, STEEP * Math.min(h[e] - lo, hi - h[e])));
            u1 += Math.max(0f, Math.min(1f, STEEP * Math.min(h[e + 1] - lo, hi - h[e + 1])));
        }
        for (; e < to; e++) {
            u0 += Math.max(0f, Math.min(1f, STEEP * Math.min(h[e] - lo, hi - h[e])));
        }
        return (long) u0 + (long) u1; // whole numbers below 2^24: exact in float
    }

    /** Share of {@code h} values (from the last call) not within {@code 1e-3} of 0 or 1. */
    double undecidedShare() {
        return h.length == 0 ? 0 : (double) undecidedCount / h.length;
    }

    /** Intervals of a table of {@code a^p} over {@code a} in {@code [0, 1]}. */
    static final int POWER_KNOTS = 4096;

    /**
     * {@code a^p} at {@code a = i / POWER_KNOTS}, {@code i = 0..POWER_KNOTS}, for {@code p >= 1}. Linear
     * interpolation errs by at most {@code step^2 / 8 * p (p - 1)}: below {@code 2.6e-6} for {@code p <= 19}.
     * Values below {@code 1e-30} are stored as 0, so that no float32 result of the regulariser's gradient is
     * subnormal (subnormal operands cost the processor a slow assist per operation).
     */
    static float[] powerTable(double p) {
        float[] t = new float[POWER_KNOTS + 1];
        for (int i = 1; i <= POWER_KNOTS; i++) {
            double v = Math.pow(i / (double) POWER_KNOTS, p);
            t[i] = v < 1e-30 ? 0f : (float) v;
        }
        return t;
    }

    private static void parallel(int rows, int cols, RowBody body) {
        if ((long) rows * cols < 1 << 15 || rows < 2) {
            body.run(0, rows);
            return;
        }
        int tasks = Math.min(rows, Math.max(2, Math.min(8, Runtime.getRuntime().availableProcessors())));
        IntStream.range(0, tasks).parallel().forEach(t -> body.run(rows * t / tasks, rows * (t + 1) / tasks));
    }

    @FunctionalInterface
    private interface RowBody {
        void run(int from, int to);
    }

    /**
     * The loss on the batch {@code idx[0, count)} and its gradient with respect to {@code v} (written to
     * {@code grad}); {@code h} is updated. {@code regularise} adds the rounding regulariser with exponent
     * {@code beta}.
     *
     * <p>Arithmetic: float32, in branch-free loops over chunks of {@link #CHUNK} weights that the JIT vectorises
     * (see {@link #softChunk}); the power {@code |2h - 1|^(beta - 1)} of the regulariser comes from a table made
     * once per call for {@code beta >= 2} (see {@link #powerTable}), from {@link Math#exp} and {@link Math#log}
     * below that.
     */
    double lossAndGradient(float[] v, int[] idx, int count, double beta, boolean regularise, float[] grad) {
        int size = rows * cols;
        int chunks = (size + CHUNK - 1) / CHUNK;
        double[] regParts = new double[chunks];
        long[] undecidedParts = new long[chunks];
        float[] power = regularise && beta >= 2 ? powerTable(beta - 1) : null;
        float regScale = (float) (-2 * lambda * beta);
        float qlo = qmin;
        float qhi = qmax;
        parallel(chunks, CHUNK, (c0, c1) -> {
            for (int c = c0; c < c1; c++) {
                int from = c * CHUNK;
                int to = Math.min(size, from + CHUNK);
                softChunk(v, from, to, qlo, qhi);
                if (regularise) {
                    regParts[c] = power != null ? regulariserChunk(from, to, power, regScale)
                            : exactRegulariserChunk(from, to, beta - 1, regScale);
                }
                undecidedParts[c] = undecided(from, to);
            }
        });
        long und = 0;
        for (long u : undecidedParts) {
            und += u;
        }
        undecidedCount = und;
        double reg = 0;
        for (double p : regParts) {
            reg += p;
        }
        if (regularise) {
            regSum = reg;
        }
        if (xb.length < count * cols) {
            xb = new float[count * cols];
            yb = new float[count * rows];
        }
        for (int i = 0; i < count; i++) {
            System.arraycopy(x, idx[i] * cols, xb, i * cols, cols);
        }
        la.sgemm(false, true, count, rows, cols, 1f, xb, 0, cols, soft, 0, cols, 0f, yb, 0, rows);
        double rec = 0;
        double g = 2.0 / count;
        for (int i = 0; i < count; i++) {
            int t = idx[i] * rows;
            for (int o = 0; o < rows; o++) {
                double pre = yb[i * rows + o] + (bias == null ? 0.0 : bias[o]);
                double p = act.apply(pre);
                double d = p - target[t + o];
                rec += d * d;
                double slope = act == Calibration.Activation.RELU ? (pre > 0 ? 1 : 0) : 1;
                yb[i * rows + o] = (float) (g * d * slope); // now dLoss/dY~
            }
        }
        rec /= count;
        // dLoss/dW~ = G^T Xb  (rows x cols)
        la.sgemm(true, false, rows, cols, count, 1f, yb, 0, rows, xb, 0, cols, 0f, gw, 0, cols);
        parallel(rows, cols, (r0, r1) -> {
            for (int e = r0 * cols; e < r1 * cols; e++) {
                grad[e] = gw[e] * dSoft[e];
            }
            if (regularise) {
                for (int e = r0 * cols; e < r1 * cols; e++) {
                    grad[e] += dReg[e];
                }
            }
        });
        return rec + (regularise ? lambda * reg : 0.0);
    }

    /** The regulariser sum (without lambda) of the last call that regularised. */
    double lastRegulariser() {
        return regSum;
    }
}
