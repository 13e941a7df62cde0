package dev.rungbook.samples;

import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertFalse;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.io.Checkpoint;
import dev.rungbook.io.TensorInfo;
import dev.rungbook.progress.Progress;
import dev.rungbook.tensor.DType;
import dev.rungbook.tensor.Tensor;
import dev.rungbook.testing.Fixtures;
import java.nio.file.Path;
import java.util.List;
import org.apache.commons.math3.stat.descriptive.moment.Kurtosis;
import org.junit.jupiter.api.Test;

class LargeCheckpointTest {
    @Test
    void layoutFillsTheSizeWithWholeTensors() {
        List<TensorInfo> oneGiB = LargeCheckpoint.layout(1L << 30);
        long bytes = oneGiB.stream().mapToLong(t -> 2L * t.shape()[0] * t.shape()[1]).sum();
        assertTrue(bytes <= 1L << 30 && bytes > (1L << 30) - 2L * 4096 * 11008, bytes + " bytes");
        assertEquals("blocks.0.attn.q.weight", oneGiB.get(0).name());
        assertEquals(DType.BF16, oneGiB.get(0).dtype());
        assertEquals(1, LargeCheckpoint.layout(1).size(), "at least one tensor");
    }

    @Test
    void valuesAreSeededHeavyTailedAndHaveOutlierColumns() {
        Tensor a = LargeCheckpoint.values(7, 3, 64, 4096);
        Tensor b = LargeCheckpoint.values(7, 3, 64, 4096);
        assertArrayEquals(a.toFloatArray(), b.toFloatArray(), "same seed, same values");
        assertFalse(java.util.Arrays.equals(a.toFloatArray(), LargeCheckpoint.values(8, 3, 64, 4096).toFloatArray()));
        // Within one row, leaving out the outlier columns, x = g1 * exp(g2 / 2) with independent standard normals:
        // kurtosis E[x^4]/E[x^2]^2 = 3 e^2 / e = 3e ~ 8.15, excess 3e - 3 ~ 5.15 (Source: the log-normal moment
        // E[exp(tZ)] = exp(t^2 / 2)). commons-math3's Kurtosis is the bias-corrected excess kurtosis.
        float[] v = a.toFloatArray();
        double[] pooled = new double[64 * 4096];
        int n = 0;
        double[] colMax = new double[4096];
        for (int r = 0; r < 64; r++) {
            double rms = 0;
            for (int c = 0; c < 4096; c++) {
                rms += (double) v[r * 4096 + c] * v[r * 4096 + c];
            }
            rms = Math.sqrt(rms / 4096);
            for (int c = 0; c < 4096; c++) {
                colMax[c] = Math.max(colMax[c], Math.abs(v[r * 4096 + c]) / rms);
            }
        }
        double median = java.util.Arrays.stream(colMax.clone()).sorted().toArray()[2048];
        int outliers = 0;
        for (double m : colMax) {
            outliers += m > 8 * median ? 1 : 0;
        }
        assertTrue(outliers >= 4 && outliers <= 40, outliers + " outlier columns (about 0.3% of 4096 expected)");
        for (int r = 0; r < 64; r++) {
            double s = 0;
            int m = 0;
            for (int c = 0; c < 4096; c++) {
                if (colMax[c] <= 8 * median) {
                    s += (double) v[r * 4096 + c] * v[r * 4096 + c];
                    m++;
                }
            }
            double rms = Math.sqrt(s / m);   // the row's own scale, outlier columns left out
            for (int c = 0; c < 4096; c++) {
                if (colMax[c] <= 8 * median) {
                    pooled[n++] = v[r * 4096 + c] / rms;
                }
            }
        }
        double excess = new Kurtosis().evaluate(pooled, 0, n);
        assertEquals(3 * Math.E - 3, excess, 0.6, "excess kurtosis of the scale mixture");
    }

    @Test
    void writesAReadableBf16Checkpoint() throws Exception {
        Path file = Fixtures.tempDir("large").resolve("small.bf16.safetensors");
        List<TensorInfo> slots = LargeCheckpoint.write(file, 2L * 4096 * 4096, 5, Progress.silent());
        assertEquals(1, slots.size());
        try (Checkpoint c = Checkpoint.open(file)) {
            assertEquals(List.of("blocks.0.attn.q.weight"), c.names());
            Tensor t = c.tensor("blocks.0.attn.q.weight");
            assertEquals(DType.BF16, t.dtype());
            assertArrayEquals(new int[] {4096, 4096}, t.shape());
            assertEquals("5", c.metadata().get("seed"));
            // The stored values are the generated ones rounded to bf16 (round to nearest even, the writer's rule).
            float[] want = LargeCheckpoint.values(5, 0, 4096, 4096).toFloatArray();
            float[] got = t.toFloatArray();
            for (int i = 0; i < want.length; i += 4099) {
                assertEquals(want[i], got[i], Math.abs(want[i]) * 0x1p-8, "element " + i);
            }
        }
    }
}
