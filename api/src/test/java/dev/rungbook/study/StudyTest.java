package dev.rungbook.study;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.metrics.ErrorReport;
import dev.rungbook.progress.OperationInterruptedException;
import dev.rungbook.quant.Quantized;
import dev.rungbook.quant.Quantizer;
import dev.rungbook.range.RangeRule;
import dev.rungbook.tensor.Tensor;
import dev.rungbook.testing.Fixtures;
import java.util.ArrayList;
import java.util.LinkedHashMap;
import java.util.List;
import java.util.Map;
import org.junit.jupiter.api.Test;
import tech.tablesaw.api.Table;

class StudyTest {
    private final Tensor w1 = Tensor.of(Fixtures.gaussian(1, 64 * 128), 64, 128).withName("fc1.weight");
    private final Tensor w2 = Tensor.of(Fixtures.gaussian(2, 32 * 64), 32, 64).withName("fc2.weight");

    @Test
    void tableHasOneRowPerTensorAndSpecWithStableColumns() {
        Quantizer[] specs = {Quantizer.linear(8), Quantizer.linear(4).perGroup(1, 32).range(RangeRule.mse()),
            Quantizer.nf4()};
        Table t = Study.of(w1, w2).compare(specs).table();
        assertEquals(List.of("tensor", "spec", "elements", "bits_per_weight", "bytes", "mse", "rmse", "mae",
                "max_abs_error", "sqnr_db", "cosine", "frobenius", "rel_frobenius", "kl_divergence"), t.columnNames());
        assertEquals(StudyResult.COLUMNS, t.columnNames());
        assertEquals(6, t.rowCount());
        int row = 0;
        for (Tensor w : new Tensor[] {w1, w2}) {
            for (Quantizer q : specs) {
                Quantized r = q.apply(w);
                ErrorReport e = r.error();
                assertEquals(w.name(), t.stringColumn("tensor").get(row));
                assertEquals(q.label(), t.stringColumn("spec").get(row));
                assertEquals(w.size(), t.intColumn("elements").get(row));
                assertEquals(r.bitsPerWeight(), t.doubleColumn("bits_per_weight").get(row));
                assertEquals(r.bytes(), t.longColumn("bytes").get(row));
                double[] v = e.values();
                for (int k = 0; k < v.length; k++) {
                    assertEquals(v[k], t.doubleColumn(ErrorReport.METRICS.get(k)).get(row), ErrorReport.METRICS
                            .get(k));
                }
                row++;
            }
        }
        assertEquals("int4 sym per-group(1,32) mse", t.stringColumn("spec").get(1));
        assertTrue(t.doubleColumn("sqnr_db").get(0) > t.doubleColumn("sqnr_db").get(1), "int8 beats int4");
    }

    @Test
    void mapKeysNameTheRowsInOrder() {
        Map<String, Tensor> m = new LinkedHashMap<>();
        m.put("b", w2);
        m.put("a", w1);
        Study s = Study.of(m);
        assertEquals(List.of("b", "a"), s.tensorNames());
        Table t = s.compare(Quantizer.linear(8)).table();
        assertEquals("b", t.stringColumn("tensor").get(0));
        assertEquals("a", t.stringColumn("tensor").get(1));
        assertEquals(List.of("tensor0", "tensor1"), Study.of(Tensor.of(new float[] {1}, 1), Tensor.of(
                new float[] {2}, 1)).tensorNames());
        assertThrows(IllegalArgumentException.class, () -> Study.of(w1, w1));
        assertThrows(IllegalArgumentException.class, () -> Study.of(w1).compare());
    }

    @Test
    void anInterruptStopsSpecsRunningInParallel() throws Exception {
        // A rule that takes 0.2 ms per element: each spec needs about 1.6 s for w1's 8192 values.
        Quantizer slow = Quantizer.linear(8).rounding(dev.rungbook.round.Rounding.custom("slow", (x, i) -> {
            java.util.concurrent.locks.LockSupport.parkNanos(200_000);
            return Math.rint(x);
        }));
        Quantizer slower = slow.perTensor();
        java.util.concurrent.atomic.AtomicReference<Throwable> thrown = new java.util.concurrent.atomic.AtomicReference<>();
        Thread t = new Thread(() -> {
            try {
                Study.of(w1).compare(slow, slower);
            } catch (Throwable e) {
                thrown.set(e);
            }
        });
        t.start();
        Thread.sleep(200);
        long start = System.nanoTime();
        t.interrupt();
        t.join(10_000);
        assertTrue(!t.isAlive(), "the study did not stop");
        assertTrue(thrown.get() instanceof OperationInterruptedException, String.valueOf(thrown.get()));
        // Stopping is prompt: well before the 1.6 s a spec needs (a generous bound for a loaded machine).
        assertTrue(System.nanoTime() - start < 1_500_000_000L, "took " + (System.nanoTime() - start) / 1e6 + " ms");
    }

    @Test
    void reportsProgressAndStopsWhenInterrupted() {
        List<Long> done = new ArrayList<>();
        Study.of(w1, w2).progress((task, d, total, loss) -> {
            if (task.equals("study")) {
                done.add(d);
                assertEquals(4, total);
                assertTrue(loss > 0);
            }
        }).compare(Quantizer.linear(8), Quantizer.linear(4));
        assertEquals(List.of(1L, 2L, 3L, 4L), done);
        Thread.currentThread().interrupt();
        try {
            assertThrows(OperationInterruptedException.class, () -> Study.of(w1).compare(Quantizer.linear(8)));
        } finally {
            Thread.interrupted();
        }
    }

    @Test
    void studiesEveryTensorOfACheckpointInFileOrder() throws Exception {
        java.nio.file.Path file = Fixtures.tempDir("study").resolve("model.safetensors");
        Map<String, Tensor> m = new LinkedHashMap<>();
        m.put("fc1.weight", w1);
        m.put("fc1.bias", Tensor.of(Fixtures.gaussian(3, 64), 64));
        m.put("fc2.weight", w2);
        dev.rungbook.io.Checkpoint.write(file, m);
        try (dev.rungbook.io.Checkpoint ckpt = dev.rungbook.io.Checkpoint.open(file)) {
            Study all = Study.of(ckpt);
            assertEquals(ckpt.names(), all.tensorNames());
            Table t = all.filter(n -> n.endsWith(".weight")).compare(Quantizer.linear(8)).table();
            assertEquals(2, t.rowCount());
            assertEquals(Quantizer.linear(8).apply(w1).error().mse(), t.doubleColumn("mse").get(
                    t.stringColumn("tensor").indexOf("fc1.weight")), 0.0);
            assertThrows(IllegalArgumentException.class, () -> all.filter(n -> false));
        }
    }

    @Test
    void specThatDoesNotFitStopsTheStudyNamingTensorAndSpec() {
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                () -> Study.of(w1, w2).compare(Quantizer.linear(4).perGroup(1, 128)));
        assertTrue(e.getMessage().startsWith("tensor 'fc2.weight': group size 128 does not divide dimension 1"),
                e.getMessage());
    }

    @Test
    void theJobQueueKeepsRowsValuesAndReadsAsTheSerialStudy() {
        // five lazy tensors (three of bf16 values, two of plain floats) and four specs: more tensors than the two
        // admitted at a time, so the queue runs specs of two tensors side by side
        Quantizer[] specs = {Quantizer.linear(8), Quantizer.linear(4).perGroup(1, 32), Quantizer.nf4(),
            Quantizer.parse("fp8-e4m3 per-channel(0)")};
        int tensors = 5;
        java.util.concurrent.atomic.AtomicLong reported = new java.util.concurrent.atomic.AtomicLong();
        java.util.concurrent.atomic.AtomicIntegerArray loads = new java.util.concurrent.atomic.AtomicIntegerArray(
                tensors);
        List<String> early = java.util.Collections.synchronizedList(new ArrayList<>());
        Map<String, Tensor> m = new LinkedHashMap<>();
        Tensor[] eager = new Tensor[tensors];
        for (int i = 0; i < tensors; i++) {
            float[] v = Fixtures.gaussian(20 + i, 32 * 64);
            if (i % 2 == 0) {
                for (int j = 0; j < v.length; j++) {
                    v[j] = Float.intBitsToFloat(Float.floatToRawIntBits(v[j]) & 0xFFFF0000);
                }
            }
            int idx = i;
            eager[i] = Tensor.of(v, 32, 64).withName("t" + i);
            m.put("t" + i, Tensor.lazy("t" + i, dev.rungbook.tensor.DType.F32, new int[] {32, 64}, () -> {
                loads.incrementAndGet(idx);
                // admitted only once every row of tensor idx - 2 is in
                if (reported.get() < (long) Math.max(0, idx - 1) * specs.length) {
                    early.add("t" + idx + " read after " + reported.get() + " rows");
                }
                return v.clone();
            }));
        }
        Table t = Study.of(m).progress((task, d, total, loss) -> {
            if (task.equals("study")) {
                reported.set(d);
            }
        }).compare(specs).table();
        assertEquals(tensors * specs.length, t.rowCount());
        assertEquals(List.of(), early);
        int row = 0;
        for (int i = 0; i < tensors; i++) {
            assertEquals(1, loads.get(i), "t" + i + " read once");
            for (Quantizer q : specs) {
                assertEquals("t" + i, t.stringColumn("tensor").get(row));
                assertEquals(q.label(), t.stringColumn("spec").get(row));
                double[] v = q.apply(eager[i]).error().values();
                for (int k = 0; k < v.length; k++) {
                    assertEquals(Double.doubleToRawLongBits(v[k]), Double.doubleToRawLongBits(
                            t.doubleColumn(ErrorReport.METRICS.get(k)).get(row)), "t" + i + " " + q.label()
                            + " " + ErrorReport.METRICS.get(k));
                }
                row++;
            }
        }
    }

    @Test
    void aSpecFailingOnALaterTensorStopsTheParallelStudyWithItsMessage() {
        Tensor w3 = Tensor.of(Fixtures.gaussian(4, 16 * 64), 16, 64).withName("fc3.weight");
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                () -> Study.of(w1, w1.withName("copy"), w2, w3).compare(Quantizer.linear(8), Quantizer.linear(4)
                        .perGroup(1, 128)));
        assertTrue(e.getMessage().startsWith("tensor 'fc2.weight': group size 128 does not divide dimension 1"),
                e.getMessage());
    }
}
