package dev.rungbook.io;

import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertFalse;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.tensor.DType;
import dev.rungbook.tensor.Tensor;
import java.io.IOException;
import java.nio.ByteBuffer;
import java.nio.ByteOrder;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.List;
import java.util.Map;
import org.junit.jupiter.api.Test;

class StreamingWriterTest {
    private static final List<TensorInfo> SLOTS = List.of(TensorInfo.of("b", DType.U16, 3),
            TensorInfo.of("a", DType.BF16, 2, 2));

    private static ByteBuffer u16(int... v) {
        ByteBuffer b = ByteBuffer.allocate(2 * v.length).order(ByteOrder.LITTLE_ENDIAN);
        for (int x : v) {
            b.putShort((short) x);
        }
        return b.flip();
    }

    @Test
    void writesDeclaredOrderAndReadsBackAsCheckpointWrites() throws IOException {
        Path dir = IoFixtures.tempDir();
        Path f = dir.resolve("s.safetensors");
        Tensor a = Tensor.of(new float[] {1.5f, -2f, 0.25f, 3f}, 2, 2);
        StreamingWriter.write(f, SLOTS, Map.of("k", "v"), sink -> {
            sink.put("b", u16(0, 40000, 65535));
            sink.put("a", a);
        });
        try (Checkpoint c = Checkpoint.open(f)) {
            assertEquals(List.of("b", "a"), c.names());
            assertEquals(DType.U16, c.info("b").dtype());
            assertArrayEquals(new float[] {0, 40000, 65535}, c.tensor("b").toFloatArray());
            assertArrayEquals(a.toFloatArray(), c.tensor("a").toFloatArray());
            assertEquals("v", c.metadata().get("k"));
        }
        // Same bytes as the in-memory writer for the same tensors in the same (name) order.
        Path g = dir.resolve("g.safetensors");
        Path h = dir.resolve("h.safetensors");
        Checkpoint.write(g, Map.of("a", a.withDType(DType.BF16)), Map.of("k", "v"));
        StreamingWriter.write(h, List.of(SLOTS.get(1)), Map.of("k", "v"), sink -> sink.put("a", a));
        assertArrayEquals(Files.readAllBytes(g), Files.readAllBytes(h));
        // U16 through the tensor path: exact integers in range only.
        Path u = dir.resolve("u.safetensors");
        Checkpoint.write(u, Map.of("u", Tensor.of(new float[] {0, 65535}, 2).withDType(DType.U16)));
        try (Checkpoint c = Checkpoint.open(u)) {
            assertArrayEquals(new float[] {0, 65535}, c.tensor("u").toFloatArray());
        }
        assertThrows(IllegalArgumentException.class, () -> Checkpoint.write(dir.resolve("x.safetensors"),
                Map.of("u", Tensor.of(new float[] {65536}, 1).withDType(DType.U16))));
    }

    @Test
    void refusesHandOversThatBreakTheDeclaration() throws IOException {
        Path dir = IoFixtures.tempDir();
        Path f = dir.resolve("s.safetensors");
        Tensor a = Tensor.of(new float[4], 2, 2);
        IllegalArgumentException order = assertThrows(IllegalArgumentException.class,
                () -> StreamingWriter.write(f, SLOTS, Map.of(), sink -> sink.put("a", a)));
        assertTrue(order.getMessage().contains("'a' handed over where 'b' was declared next"), order.getMessage());
        IllegalArgumentException size = assertThrows(IllegalArgumentException.class,
                () -> StreamingWriter.write(f, SLOTS, Map.of(), sink -> sink.put("b", u16(1, 2))));
        assertTrue(size.getMessage().contains("handed over 4 bytes, declared 6"), size.getMessage());
        IllegalArgumentException shape = assertThrows(IllegalArgumentException.class,
                () -> StreamingWriter.write(f, SLOTS, Map.of(), sink -> {
                    sink.put("b", u16(1, 2, 3));
                    sink.put("a", Tensor.of(new float[4], 4));
                }));
        assertTrue(shape.getMessage().contains("has shape [4], declared [2, 2]"), shape.getMessage());
        IllegalStateException missing = assertThrows(IllegalStateException.class,
                () -> StreamingWriter.write(f, SLOTS, Map.of(), sink -> sink.put("b", u16(1, 2, 3))));
        assertTrue(missing.getMessage().contains("1 of 2 declared tensors were written; next missing: 'a'"),
                missing.getMessage());
        IllegalArgumentException twice = assertThrows(IllegalArgumentException.class,
                () -> StreamingWriter.write(f, List.of(SLOTS.get(0), SLOTS.get(0)), Map.of(), sink -> { }));
        assertTrue(twice.getMessage().contains("declared twice"), twice.getMessage());
        assertFalse(Files.exists(f));
        try (var s = Files.list(dir)) {
            assertEquals(0, s.count(), "temporary files left behind");
        }
    }
}
