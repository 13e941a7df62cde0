package dev.rungbook.io;

import dev.rungbook.tensor.DType;
import java.nio.ByteBuffer;
import java.nio.ByteOrder;
import java.util.SplittableRandom;
import java.util.concurrent.TimeUnit;
import org.openjdk.jmh.annotations.Benchmark;
import org.openjdk.jmh.annotations.BenchmarkMode;
import org.openjdk.jmh.annotations.Fork;
import org.openjdk.jmh.annotations.Level;
import org.openjdk.jmh.annotations.Measurement;
import org.openjdk.jmh.annotations.Mode;
import org.openjdk.jmh.annotations.OutputTimeUnit;
import org.openjdk.jmh.annotations.Param;
import org.openjdk.jmh.annotations.Scope;
import org.openjdk.jmh.annotations.Setup;
import org.openjdk.jmh.annotations.State;
import org.openjdk.jmh.annotations.Warmup;

/**
 * Issue 2's conversion target: BF16 to float32 for 256M values at no less than 1 G values/s on two cores, through
 * the same package-private decoder the checkpoint readers use (this class sits in {@code dev.rungbook.io} for that
 * reason). The side-by-side baseline is a plain bulk copy of the same bytes into a {@code short[]}, i.e. what memory
 * bandwidth allows without any conversion.
 */
@State(Scope.Benchmark)
@BenchmarkMode(Mode.SingleShotTime)
@OutputTimeUnit(TimeUnit.MILLISECONDS)
@Warmup(iterations = 3)
@Measurement(iterations = 8)
@Fork(value = 1, jvmArgsAppend = {"-Xmx6g"})
public class Bf16DecodeBench {
    /** Values to convert (2^28 = 256M for the target). */
    @Param("268435456")
    public int values;

    private ByteBuffer codes;
    private float[] out;
    private short[] copy;

    @Setup(Level.Trial)
    public void setUp() {
        codes = ByteBuffer.allocateDirect(values * 2).order(ByteOrder.LITTLE_ENDIAN);
        SplittableRandom r = new SplittableRandom(3);
        for (int i = 0; i < values; i++) {
            // bfloat16 codes of values in about [-4, 4]: sign, exponent 120..129, any mantissa
            int code = (r.nextInt(2) << 15) | ((120 + r.nextInt(10)) << 7) | r.nextInt(128);
            codes.putShort(i * 2, (short) code);
        }
        out = new float[values];
        copy = new short[values];
    }

    /** The library's BF16 decoder (parallel slices for large inputs). */
    @Benchmark
    public float decodeBf16() {
        codes.position(0);
        Decode.decode(codes, DType.BF16, out, 0, values);
        return out[values - 1];
    }

    /** Baseline: copy the same bytes into a short[] without converting. */
    @Benchmark
    public short bulkCopyBaseline() {
        codes.position(0);
        codes.asShortBuffer().get(copy);
        return copy[values - 1];
    }
}
