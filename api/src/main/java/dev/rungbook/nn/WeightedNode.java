package dev.rungbook.nn;

import dev.rungbook.internal.TensorAccess;
import dev.rungbook.tensor.DType;
import java.util.ArrayList;
import java.util.List;

/**
 * Package-private: the training node of a {@link WeightedLayer}. It keeps the full-precision ("latent") weight and the
 * bias as parameters; with a {@link WeightTransform} (simulated quantization for quantization-aware training) the
 * forward pass uses the transformed weight and the backward pass hands the weight gradient to the transform, which
 * turns it into the latent weight's gradient (straight-through estimator, or the trained-ternary rule).
 */
abstract class WeightedNode extends Node {
    final WeightedLayer source;
    final Param weight;
    final Param bias;
    private final WeightTransform transform;
    private float[] effective;

    WeightedNode(WeightedLayer source, WeightTransform transform) {
        this.source = source;
        this.weight = new Param(source.name() + ".weight", source.weight().toFloatArray(), true);
        this.bias = new Param(source.name() + ".bias", source.bias().toFloatArray(), false);
        this.transform = transform;
        if (transform != null) {
            transform.prepare(weight.value);
        }
    }

    /** The forward pass with the given weight values. */
    abstract Act forward(Act x, float[] w, boolean training);

    /** The backward pass with the weight values of the forward pass; adds to {@code gw} and the bias gradient. */
    abstract Act backward(Act gy, float[] w, float[] gw, boolean needInput);

    @Override
    final Act forward(Act x, boolean training) {
        effective = transform == null ? weight.value : transform.forward(weight.value);
        return forward(x, effective, training);
    }

    @Override
    final Act backward(Act gy, boolean needInput) {
        if (transform == null) {
            return backward(gy, effective, weight.grad, needInput);
        }
        float[] ge = new float[effective.length];
        Act gx = backward(gy, effective, ge, needInput);
        transform.backward(weight.value, ge, weight.grad);
        return gx;
    }

    @Override
    final List<Param> params() {
        List<Param> p = new ArrayList<>(List.of(weight, bias));
        if (transform != null) {
            p.addAll(transform.params());
        }
        return p;
    }

    /** The layer with the weight the forward pass uses (the quantized one under a transform). */
    @Override
    final Layer layer() {
        float[] w = transform == null ? weight.value : transform.forward(weight.value);
        return withValues(w.clone());
    }

    /** The layer with the full-precision (latent) weight. */
    final WeightedLayer latentLayer() {
        return withValues(weight.value.clone());
    }

    private WeightedLayer withValues(float[] w) {
        String n = source.name();
        return source.withWeight(TensorAccess.wrap(w, source.weight().shape(), DType.F32, n + ".weight"))
                .withBias(TensorAccess.wrap(bias.value.clone(), source.bias().shape(), DType.F32, n + ".bias"));
    }

    /** Sums {@code gy} [N, C, P] over N and P into the bias gradient (P = 1 for a linear layer). */
    final void addBiasGradient(float[] gy, int n, int c, int p) {
        float[] gb = bias.grad;
        if (p == 1) {
            for (int s = 0; s < n; s++) {
                for (int o = 0; o < c; o++) {
                    gb[o] += gy[s * c + o];
                }
            }
            return;
        }
        for (int s = 0; s < n; s++) {
            for (int o = 0; o < c; o++) {
                int base = (s * c + o) * p;
                float acc = 0f;
                for (int q = 0; q < p; q++) {
                    acc += gy[base + q];
                }
                gb[o] += acc;
            }
        }
    }
}
