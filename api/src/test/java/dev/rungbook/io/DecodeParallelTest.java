package dev.rungbook.io;

import static org.junit.jupiter.api.Assertions.assertEquals;

import dev.rungbook.tensor.DType;
import dev.rungbook.tensor.FloatFormat;
import java.nio.ByteBuffer;
import java.nio.ByteOrder;
import java.util.SplittableRandom;
import org.junit.jupiter.api.Assumptions;
import org.junit.jupiter.api.Test;

class DecodeParallelTest {
    @Test
    void parallelSlicesDecodeLikeTheElementwiseDefinition() {
        // Reference: FloatFormat.decode, the bfloat16 definition (upper half of a binary32), element by element.
        Assumptions.assumeTrue(Runtime.getRuntime().availableProcessors() > 1, "needs two cores");
        int n = 2 * Decode.PARALLEL_MIN_ELEMENTS + 3;
        ByteBuffer b = ByteBuffer.allocate(n * 2 + 6).order(ByteOrder.LITTLE_ENDIAN);
        SplittableRandom r = new SplittableRandom(5);
        for (int i = 0; i < n + 3; i++) {
            b.putShort(i * 2, (short) r.nextInt(1 << 16));
        }
        b.position(6); // start mid-buffer: slices must honour the start position
        float[] out = new float[n + 1];
        Decode.decode(b, DType.BF16, out, 1, n);
        assertEquals(6 + 2 * n, b.position());
        for (int i = 0; i < n; i++) {
            int code = b.getShort(6 + 2 * i) & 0xFFFF;
            float expected = FloatFormat.BF16.decode(code);
            if (Float.floatToRawIntBits(expected) != Float.floatToRawIntBits(out[1 + i])) {
                assertEquals(Float.floatToRawIntBits(expected), Float.floatToRawIntBits(out[1 + i]), "element " + i);
            }
        }
        assertEquals(0f, out[0]);
    }
}
