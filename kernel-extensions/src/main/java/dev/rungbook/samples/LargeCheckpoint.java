package dev.rungbook.samples;

import dev.rungbook.io.StreamingWriter;
import dev.rungbook.io.TensorInfo;
import dev.rungbook.progress.Progress;
import dev.rungbook.tensor.DType;
import dev.rungbook.tensor.Tensor;
import java.nio.file.Path;
import java.util.ArrayList;
import java.util.LinkedHashMap;
import java.util.List;
import java.util.Locale;
import java.util.Map;
import java.util.SplittableRandom;
import java.util.stream.IntStream;

/**
 * A large synthetic bf16 checkpoint for scale demos and benchmarks, made on demand and never committed: blocks of
 * transformer-like weight matrices (four 4096 x 4096 attention projections and a 11008 x 4096 / 4096 x 11008 MLP
 * pair) until the requested size is reached, streamed to disk one tensor at a time.
 *
 * <p>The values look like trained weights where it matters for quantization: heavy tails (a normal whose scale is
 * itself log-normal, excess kurtosis about 5), log-normally spread output-channel ranges, and a few input columns with
 * 20-40x larger weights (outlier features). Everything is seeded: the same size and seed give the same bytes, whatever
 * the number of threads.
 */
public final class LargeCheckpoint {
    /** Width of the simulated model. */
    static final int WIDTH = 4096;
    /** Width of its MLP. */
    static final int HIDDEN = 11008;
    private static final String[][] BLOCK = {
        {"attn.q", "4096x4096"}, {"attn.k", "4096x4096"}, {"attn.v", "4096x4096"}, {"attn.o", "4096x4096"},
        {"mlp.up", "11008x4096"}, {"mlp.down", "4096x11008"}};

    private LargeCheckpoint() {
    }

    /** The tensors of a checkpoint of about {@code bytes} bytes (at least one tensor), in file order. */
    static List<TensorInfo> layout(long bytes) {
        List<TensorInfo> out = new ArrayList<>();
        long total = 0;
        for (int block = 0; total < bytes || out.isEmpty(); block++) {
            for (String[] t : BLOCK) {
                String[] dims = t[1].split("x");
                int rows = Integer.parseInt(dims[0]);
                int cols = Integer.parseInt(dims[1]);
                if (!out.isEmpty() && total + 2L * rows * cols > bytes) {
                    return out;
                }
                out.add(TensorInfo.of(String.format(Locale.ROOT, "blocks.%d.%s.weight", block, t[0]), DType.BF16,
                        rows, cols));
                total += 2L * rows * cols;
            }
        }
        return out;
    }

    /**
     * Writes the checkpoint atomically to {@code file} (a {@code .safetensors} path).
     *
     * @param bytes about how large the tensor data should be (it stops before exceeding it, with at least one tensor)
     * @param seed the seed of every value
     * @param progress told after each tensor; the write stops when the thread is interrupted
     * @return the tensors written
     */
    public static List<TensorInfo> write(Path file, long bytes, long seed, Progress progress) {
        if (bytes <= 0) {
            throw new IllegalArgumentException("size must be positive, got " + bytes + " bytes");
        }
        List<TensorInfo> slots = layout(bytes);
        Map<String, String> meta = new LinkedHashMap<>();
        meta.put("note", "synthetic heavy-tailed weights with outlier columns (rungbook samples --large); not a model");
        meta.put("seed", Long.toString(seed));
        String task = "writing " + file.getFileName();
        StreamingWriter.write(file, slots, meta, sink -> {
            for (int t = 0; t < slots.size(); t++) {
                Progress.checkInterrupted(task);
                TensorInfo slot = slots.get(t);
                sink.put(slot.name(), values(seed, t, (int) slot.shape()[0], (int) slot.shape()[1]));
                progress.update(task, t + 1, slots.size(), Double.NaN);
            }
        });
        progress.finish(task);
        return slots;
    }

    /** The values of tensor {@code index}: row by row from seeds derived from (seed, index, row). */
    static Tensor values(long seed, int index, int rows, int cols) {
        SplittableRandom columns = new SplittableRandom(mix(seed, index, -1));
        float[] columnScale = new float[cols];
        for (int c = 0; c < cols; c++) {
            // About 0.3% of input columns are outlier features, 20-40x larger.
            columnScale[c] = columns.nextDouble() < 0.003 ? (float) (20 + 20 * columns.nextDouble()) : 1f;
        }
        float[] v = new float[rows * cols];
        double base = 1 / Math.sqrt(cols);
        IntStream.range(0, rows).parallel().forEach(r -> {
            SplittableRandom rnd = new SplittableRandom(mix(seed, index, r));
            double rowScale = base * Math.exp(0.5 * gaussian(rnd));
            int off = r * cols;
            for (int c = 0; c < cols; c++) {
                // A Gaussian scale mixture: the scale exp(0.5 g) is log-normal, which fattens the tails.
                double x = gaussian(rnd) * Math.exp(0.5 * gaussian(rnd));
                v[off + c] = (float) (x * rowScale * columnScale[c]);
            }
        });
        return Tensor.of(v, rows, cols);
    }

    private static long mix(long seed, int index, int row) {
        long h = seed * 0x9E3779B97F4A7C15L + index * 0xC2B2AE3D27D4EB4FL + row * 0x165667B19E3779F9L;
        h ^= h >>> 31;
        return h * 0xBF58476D1CE4E5B9L;
    }

    /** A standard normal draw (Box-Muller, one of the pair). */
    private static double gaussian(SplittableRandom r) {
        double u = 1 - r.nextDouble();
        return Math.sqrt(-2 * Math.log(u)) * Math.cos(2 * Math.PI * r.nextDouble());
    }
}
