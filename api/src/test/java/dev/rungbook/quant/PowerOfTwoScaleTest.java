package dev.rungbook.quant;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.tensor.FloatFormat;
import dev.rungbook.tensor.Tensor;
import org.junit.jupiter.api.Test;

/** Power-of-two scales on channels of tiny (subnormal) values: never 0, never NaN. */
class PowerOfTwoScaleTest {

    @Test
    void tinyChannelsGetTheSmallestFloatScaleNotZero() {
        // Row 0 holds subnormal values whose ideal scale (max|x| / top level) is below 2^-149, the smallest float32;
        // row 1 is ordinary. Before, the power-of-two scale of row 0 rounded to 0: its codes became NaN (float
        // grids, 0 / 0) or every value became 0 (linear grids).
        Tensor t = Tensor.of(new float[] {1e-44f, -3e-45f, 0f, 1.4e-45f, 1f, 0.5f, -0.25f, 0.125f}, 2, 4);
        Quantizer[] specs = {Quantizer.floatFormat(FloatFormat.E4M3).powerOfTwoScale().perChannel(0),
            Quantizer.floatFormat(FloatFormat.E5M2).powerOfTwoScale().perChannel(0),
            Quantizer.linear(8).powerOfTwoScale(), Quantizer.linear(8).asymmetric().powerOfTwoScale(),
            Quantizer.linear(4).powerOfTwoScale().perGroup(1, 2), Quantizer.logarithmic(4).powerOfTwoScale()
                .perChannel(0), Quantizer.nf4().powerOfTwoScale().perGroup(1, 4)};
        for (Quantizer q : specs) {
            Quantized r = q.apply(t);
            float[] d = r.dequantized().toFloatArray();
            float[] sc = r.scales().toFloatArray();
            for (float s : sc) {
                // Source: definition of a power-of-two scale; Float.MIN_VALUE = 2^-149 is one (IEEE 754 binary32)
                assertTrue(s > 0 && Float.isFinite(s), q.label() + ": scale " + s);
                double v = s; // as a double even 2^-149 is normal, so its exponent tells the power
                assertEquals(Math.scalb(1.0, Math.getExponent(v)), v, 0.0, q.label() + ": scale " + s);
            }
            for (int i = 0; i < d.length; i++) {
                float x = t.getFlat(i);
                assertTrue(Float.isFinite(d[i]), q.label() + " value " + i + ": " + d[i]);
                // every value lands within one step of its channel's grid; tiny values stay tiny
                assertTrue(Math.abs(d[i] - x) <= (i < 4 ? 2e-44 : 0.5), q.label() + " value " + i + ": " + d[i]);
            }
            assertEquals(0f, d[2], q.label() + ": zero stays exact");
        }
    }
}
