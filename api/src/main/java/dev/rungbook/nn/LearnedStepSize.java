package dev.rungbook.nn;

import java.util.List;

/**
 * Package-private: learned step size quantization (Esser et al., "Learned Step Size Quantization", ICLR 2020) of one
 * layer's weight to signed {@code bits}-bit codes {@code -Qn .. Qp} ({@code Qn = 2^(b-1)}, {@code Qp = 2^(b-1) - 1}),
 * with one learned step per tensor or per output channel; see {@link Trainer#learnedStepSize(int, boolean)}.
 */
final class LearnedStepSize implements WeightTransform {
    private final int qn;
    private final int qp;
    private final boolean perChannel;
    private final int channels;
    final Node.Param step;

    LearnedStepSize(int bits, boolean perChannel, String layer, int channels) {
        this.qn = 1 << (bits - 1);
        this.qp = (1 << (bits - 1)) - 1;
        this.perChannel = perChannel;
        this.channels = perChannel ? channels : 1;
        this.step = new Node.Param(layer + ".weight_step", new float[this.channels], false);
    }

    /** The initial step {@code 2 mean|w| / sqrt(Qp)} of each segment (the paper's rule). */
    @Override
    public void prepare(float[] latent) {
        int per = latent.length / channels;
        for (int c = 0; c < channels; c++) {
            double sum = 0;
            for (int i = c * per; i < (c + 1) * per; i++) {
                sum += Math.abs(latent[i]);
            }
            double s = 2 * (sum / per) / Math.sqrt(qp);
            step.value[c] = (float) (s > 0 ? s : 1e-8);
        }
    }

    @Override
    public float[] forward(float[] latent) {
        int per = latent.length / channels;
        float[] out = new float[latent.length];
        for (int c = 0; c < channels; c++) {
            float s = step.value[c];
            for (int i = c * per; i < (c + 1) * per; i++) {
                double q = Math.max(-qn, Math.min(qp, Math.rint(latent[i] / s)));
                out[i] = q == 0 ? 0f : (float) (q * s); // no negative zero: one level for 0
            }
        }
        return out;
    }

    /**
     * The paper's gradients: the weight's is the straight-through one inside the code range and 0 where clipped; the
     * step's is {@code round(w/s) - w/s} inside, {@code -Qn} or {@code Qp} where clipped, summed and multiplied by
     * {@code 1 / sqrt(N Qp)} with {@code N} the weights sharing the step.
     */
    @Override
    public void backward(float[] latent, float[] gEffective, float[] gLatent) {
        int per = latent.length / channels;
        double scale = 1 / Math.sqrt((double) per * qp);
        for (int c = 0; c < channels; c++) {
            float s = step.value[c];
            double gs = 0;
            for (int i = c * per; i < (c + 1) * per; i++) {
                double v = latent[i] / s;
                float g = gEffective[i];
                if (v <= -qn) {
                    gs -= qn * g;
                } else if (v >= qp) {
                    gs += qp * g;
                } else {
                    gs += (Math.rint(v) - v) * g;
                    gLatent[i] += g;
                }
            }
            step.grad[c] += (float) (gs * scale);
        }
    }

    @Override
    public List<Node.Param> params() {
        return List.of(step);
    }

    @Override
    public String toString() {
        return "learned step size " + (perChannel ? "per channel" : "per tensor");
    }
}
