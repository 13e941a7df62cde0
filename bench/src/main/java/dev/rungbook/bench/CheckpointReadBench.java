package dev.rungbook.bench;

import dev.rungbook.internal.TensorAccess;
import dev.rungbook.io.Checkpoint;
import dev.rungbook.tensor.Tensor;
import java.io.IOException;
import java.nio.ByteBuffer;
import java.nio.channels.FileChannel;
import java.nio.file.Files;
import java.nio.file.Path;
import java.nio.file.StandardOpenOption;
import java.util.LinkedHashMap;
import java.util.Map;
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
 * Issue 2's read target: opening a 1 GiB float32 safetensors file and reading every value, against a plain
 * sequential {@link FileChannel} read of the same file. Both run warm (the file sits in the page cache after the
 * first iteration), side by side in one run; the ratio of their times is what the README reports.
 */
@State(Scope.Benchmark)
@BenchmarkMode(Mode.SingleShotTime)
@OutputTimeUnit(TimeUnit.MILLISECONDS)
@Warmup(iterations = 3)
@Measurement(iterations = 8)
@Fork(value = 1, jvmArgsAppend = {"-Xmx6g"})
public class CheckpointReadBench {
    /** File size in MiB (1024 for the target; smaller for a quick look). */
    @Param("1024")
    public int mib;

    private Path file;
    private final ByteBuffer buffer = ByteBuffer.allocateDirect(8 << 20);

    @Setup(Level.Trial)
    public void makeFile() throws IOException {
        Path dir = Path.of(System.getProperty("rungbook.bench.dir", "target/bench-data"));
        Files.createDirectories(dir);
        file = dir.resolve("read-" + mib + "MiB.f32.safetensors");
        if (Files.exists(file)) {
            return;
        }
        int tensors = 16;
        int perTensor = (int) ((long) mib * (1 << 20) / 4 / tensors);
        SplittableRandom r = new SplittableRandom(1);
        Map<String, Tensor> m = new LinkedHashMap<>();
        for (int t = 0; t < tensors; t++) {
            float[] v = new float[perTensor];
            for (int i = 0; i < v.length; i++) {
                v[i] = (float) r.nextDouble(-1, 1);
            }
            m.put(String.format("layer%02d.weight", t), Tensor.of(v, perTensor / 1024, 1024));
        }
        Checkpoint.write(file, m, Map.of());
    }

    /** Baseline: read the whole file sequentially into a direct buffer, 8 MiB at a time. */
    @Benchmark
    public long plainFileChannelRead() throws IOException {
        long total = 0;
        try (FileChannel ch = FileChannel.open(file, StandardOpenOption.READ)) {
            while (true) {
                buffer.clear();
                int n = ch.read(buffer);
                if (n < 0) {
                    break;
                }
                total += n + buffer.get(0);
            }
        }
        return total;
    }

    /** Rungbook: open the checkpoint and load every tensor's values as float32. */
    @Benchmark
    public double checkpointLoadAll() {
        double sum = 0;
        try (Checkpoint c = Checkpoint.open(file)) {
            for (String name : c.names()) {
                float[] v = TensorAccess.data(c.tensor(name));
                sum += v[0] + v[v.length - 1];
            }
        }
        return sum;
    }
}
