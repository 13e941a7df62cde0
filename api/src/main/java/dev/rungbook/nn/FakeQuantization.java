package dev.rungbook.nn;

import dev.rungbook.internal.TensorAccess;
import dev.rungbook.quant.Quantizer;
import dev.rungbook.tensor.DType;
import dev.rungbook.tensor.Tensor;
import java.util.List;

/**
 * Package-private: simulated quantization of a weight by any {@link Quantizer}, with the straight-through estimator
 * backward (the gradient with respect to the dequantized weight is used as the full-precision weight's gradient).
 */
final class FakeQuantization implements WeightTransform {
    private final Quantizer quantizer;
    private final String name;
    private final int[] shape;

    FakeQuantization(Quantizer quantizer, String name, int[] shape) {
        this.quantizer = quantizer;
        this.name = name;
        this.shape = shape.clone();
    }

    @Override
    public float[] forward(float[] latent) {
        Tensor w = TensorAccess.wrap(latent.clone(), shape, DType.F32, name);
        return quantizer.apply(w).dequantized().toFloatArray();
    }

    @Override
    public void backward(float[] latent, float[] gEffective, float[] gLatent) {
        for (int i = 0; i < gLatent.length; i++) {
            gLatent[i] += gEffective[i];
        }
    }

    @Override
    public List<Node.Param> params() {
        return List.of();
    }
}
