package dev.rungbook.nn;

import java.util.List;

/**
 * Package-private: trained ternary quantization (Zhu, Han, Mao &amp; Dally, "Trained Ternary Quantization", ICLR
 * 2017) of one layer's weight; see {@link Trainer#trainedTernary(double)} for the rules.
 */
final class TrainedTernary implements WeightTransform {
    private final double t;
    final Node.Param positive;
    final Node.Param negative;

    TrainedTernary(double t, String layer) {
        this.t = t;
        this.positive = new Node.Param(layer + ".ternary_positive_scale", new float[1], false);
        this.negative = new Node.Param(layer + ".ternary_negative_scale", new float[1], false);
    }

    /** The threshold {@code t * max|w|}. */
    float threshold(float[] w) {
        float max = 0f;
        for (float v : w) {
            max = Math.max(max, Math.abs(v));
        }
        return (float) (t * max);
    }

    @Override
    public void prepare(float[] latent) {
        float delta = threshold(latent);
        double sp = 0;
        double sn = 0;
        int np = 0;
        int nn = 0;
        float max = 0f;
        for (float v : latent) {
            max = Math.max(max, Math.abs(v));
            if (v > delta) {
                sp += v;
                np++;
            } else if (v < -delta) {
                sn -= v;
                nn++;
            }
        }
        positive.value[0] = (float) (np > 0 ? sp / np : delta);
        negative.value[0] = (float) (nn > 0 ? sn / nn : delta);
        if (max > 0f) {
            for (int i = 0; i < latent.length; i++) {
                latent[i] /= max;
            }
        }
    }

    @Override
    public float[] forward(float[] latent) {
        float delta = threshold(latent);
        float wp = positive.value[0];
        float wn = negative.value[0];
        float[] out = new float[latent.length];
        for (int i = 0; i < latent.length; i++) {
            float v = latent[i];
            out[i] = v > delta ? wp : v < -delta ? -wn : 0f;
        }
        return out;
    }

    @Override
    public void backward(float[] latent, float[] gEffective, float[] gLatent) {
        float delta = threshold(latent);
        float wp = positive.value[0];
        float wn = negative.value[0];
        double gp = 0;
        double gn = 0;
        for (int i = 0; i < latent.length; i++) {
            float v = latent[i];
            float g = gEffective[i];
            if (v > delta) {
                gp += g;
                gLatent[i] += wp * g;
            } else if (v < -delta) {
                gn -= g;
                gLatent[i] += wn * g;
            } else {
                gLatent[i] += g;
            }
        }
        positive.grad[0] += (float) gp;
        negative.grad[0] += (float) gn;
    }

    @Override
    public List<Node.Param> params() {
        return List.of(positive, negative);
    }
}
