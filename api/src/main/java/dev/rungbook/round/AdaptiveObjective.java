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
    /** |V| beyond which h(V) is clipped to 0 or 1: ln(11) (sigmoid 1/12 or 11/12), with a margin of 1e-9. */
    private static final double CLIPPED = Math.log(11.0) + 1e-9;

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
    private final float[] gw;
    private float[] xb = new float[0];
    private float[] yb = new float[0];
    private double regSum;

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

    /** Share of {@code h} values (from the last call) not within {@code 1e-3} of 0 or 1. */
    double undecidedShare() {
        long u = 0;
        for (float v : h) {
            if (v > 1e-3f && v < 1 - 1e-3f) {
                u++;
            }
        }
        return h.length == 0 ? 0 : (double) u / h.length;
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
     */
    double lossAndGradient(float[] v, int[] idx, int count, double beta, boolean regularise, float[] grad) {
        double[] regParts = new double[rows];
        parallel(rows, cols, (r0, r1) -> {
            for (int r = r0; r < r1; r++) {
                double rs = 0;
                for (int e = r * cols; e < (r + 1) * cols; e++) {
                    double ve = v[e];
                    if (ve > CLIPPED || ve < -CLIPPED) {
                        // h is exactly 0 or 1 (sigmoid below 1/12 or above 11/12): no gradient, no regulariser,
                        // no transcendental functions. After annealing this is most weights.
                        double hv = ve > 0 ? 1.0 : 0.0;
                        h[e] = (float) hv;
                        double code = base[e] + hv;
                        code = code < qmin ? qmin : (code > qmax ? qmax : code);
                        soft[e] = (float) (scale[e] * (code - zero[e]));
                        dSoft[e] = 0f;
                        dReg[e] = 0f;
                        continue;
                    }
                    double sig = 1.0 / (1.0 + Math.exp(-ve));
                    double hv = sig * (ZETA - GAMMA) + GAMMA;
                    boolean inside = hv > 0 && hv < 1;
                    hv = hv <= 0 ? 0 : (hv >= 1 ? 1 : hv);
                    h[e] = (float) hv;
                    double dh = inside ? (ZETA - GAMMA) * sig * (1 - sig) : 0.0;
                    double code = base[e] + hv;
                    boolean inRange = code >= qmin && code <= qmax;
                    code = code < qmin ? qmin : (code > qmax ? qmax : code);
                    soft[e] = (float) (scale[e] * (code - zero[e]));
                    dSoft[e] = inRange ? (float) (scale[e] * dh) : 0f;
                    if (regularise) {
                        double t = 2 * hv - 1;
                        double a = Math.abs(t);
                        // a^(beta-1) by exp/log; a = 0 gives 0 (beta >= 1).
                        double p1 = a == 0 ? 0.0 : Math.exp((beta - 1) * Math.log(a));
                        rs += 1 - a * p1;
                        dReg[e] = (float) (lambda * -beta * p1 * Math.signum(t) * 2 * dh);
                    }
                }
                regParts[r] = rs;
            }
        });
        double reg = 0;
        for (double p : regParts) {
            reg += p;
        }
        regSum = reg;
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
                grad[e] = gw[e] * dSoft[e] + (regularise ? dReg[e] : 0f);
            }
        });
        return rec + (regularise ? lambda * reg : 0.0);
    }

    /** The regulariser sum (without lambda) of the last call that regularised. */
    double lastRegulariser() {
        return regSum;
    }
}
