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
import java.nio.channels.FileChannel;
import java.nio.charset.StandardCharsets;
import java.nio.file.Files;
import java.nio.file.Path;
import java.nio.file.StandardOpenOption;
import java.nio.file.attribute.FileTime;
import java.util.List;
import java.util.Map;
import org.junit.jupiter.api.Test;

/** safetensors layouts built byte by byte in the test, read back through {@link Checkpoint}. */
class SafetensorsReaderTest {
    /** One tensor per dtype, with codes whose values the format specifications give. */
    private static Path everyDtype(Path dir) throws IOException {
        ByteBuffer d = ByteBuffer.allocate(256).order(ByteOrder.LITTLE_ENDIAN);
        StringBuilder h = new StringBuilder("{\"__metadata__\":{\"format\":\"pt\",\"note\":\"caf\u00e9 \u2713\"}");
        int[] at = {0};
        java.util.function.BiConsumer<String, String> entry = (name, spec) -> {
            h.append(",\"").append(name).append("\":{").append(spec).append(",\"data_offsets\":[").append(at[0])
                    .append(",").append(d.position()).append("]}");
            at[0] = d.position();
        };
        d.putDouble(1.5).putDouble(0.1);
        entry.accept("f64", "\"dtype\":\"F64\",\"shape\":[2]");
        d.putFloat(-0.0f).putFloat(Float.NaN).putFloat(Float.NEGATIVE_INFINITY).putFloat(Float.MIN_VALUE);
        entry.accept("f32", "\"dtype\":\"F32\",\"shape\":[2,2]");
        for (int s : new int[] {0x3C00, 0xC000, 0x7BFF, 0x0001, 0x7C00, 0x7E00}) {
            d.putShort((short) s);
        }
        entry.accept("f16", "\"dtype\":\"F16\",\"shape\":[6]");
        for (int s : new int[] {0x3F80, 0xC2F7, 0x7F80, 0x0001}) {
            d.putShort((short) s);
        }
        entry.accept("bf16", "\"dtype\":\"BF16\",\"shape\":[4]");
        d.put((byte) 0x7E).put((byte) 0x01).put((byte) 0x7F).put((byte) 0x38).put((byte) 0xB8);
        entry.accept("e4m3", "\"dtype\":\"F8_E4M3\",\"shape\":[5]");
        d.put((byte) 0x7B).put((byte) 0x7C).put((byte) 0x3C).put((byte) 0x01);
        entry.accept("e5m2", "\"dtype\":\"F8_E5M2\",\"shape\":[4]");
        d.putLong((1L << 53) + 1).putLong(-5);
        entry.accept("i64", "\"dtype\":\"I64\",\"shape\":[2]");
        d.putInt(16777217).putInt(Integer.MIN_VALUE);
        entry.accept("i32", "\"dtype\":\"I32\",\"shape\":[2]");
        d.putShort((short) -32768).putShort((short) 1234);
        entry.accept("i16", "\"dtype\":\"I16\",\"shape\":[2]");
        d.put((byte) -128).put((byte) 127);
        entry.accept("i8", "\"dtype\":\"I8\",\"shape\":[2]");
        d.put((byte) 255).put((byte) 0);
        entry.accept("u8", "\"dtype\":\"U8\",\"shape\":[2]");
        d.put((byte) 0).put((byte) 1).put((byte) 2);
        entry.accept("bool", "\"dtype\":\"BOOL\",\"shape\":[3]");
        entry.accept("empty", "\"dtype\":\"F32\",\"shape\":[0,7]");
        d.putFloat(42f);
        entry.accept("scalar", "\"dtype\":\"F32\",\"shape\":[]");
        h.append("}   ");
        byte[] data = java.util.Arrays.copyOf(d.array(), d.position());
        return IoFixtures.write(dir, "every.safetensors", IoFixtures.safetensors(h.toString(), data));
    }

    @Test
    void readsEveryDtypeAsItsSpecificationDefines() throws IOException {
        Path file = everyDtype(IoFixtures.tempDir());
        try (Checkpoint c = Checkpoint.open(file)) {
            assertEquals("safetensors", c.format());
            assertEquals(List.of("f64", "f32", "f16", "bf16", "e4m3", "e5m2", "i64", "i32", "i16", "i8", "u8",
                    "bool", "empty", "scalar"), c.names(), "header order");
            assertEquals(Map.of("format", "pt", "note", "caf\u00e9 \u2713"), c.metadata());
            // Source: IEEE 754 round to nearest even, double -> float (JLS 5.1.3).
            assertArrayEquals(new float[] {1.5f, 0.1f}, c.tensor("f64").toFloatArray());
            float[] f32 = c.tensor("f32").toFloatArray();
            assertEquals(Float.floatToRawIntBits(-0.0f), Float.floatToRawIntBits(f32[0]));
            assertTrue(Float.isNaN(f32[1]));
            assertEquals(Float.NEGATIVE_INFINITY, f32[2]);
            assertEquals(Float.MIN_VALUE, f32[3]);
            assertArrayEquals(new int[] {2, 2}, c.tensor("f32").shape());
            // Source: IEEE 754 binary16: 0x3C00 = 1, 0xC000 = -2, 0x7BFF = 65504, 0x0001 = 2^-24, 0x7C00 = inf.
            float[] f16 = c.tensor("f16").toFloatArray();
            assertArrayEquals(new float[] {1f, -2f, 65504f, 0x1p-24f, Float.POSITIVE_INFINITY},
                    java.util.Arrays.copyOf(f16, 5));
            assertTrue(Float.isNaN(f16[5]));
            // Source: bfloat16 is the upper half of binary32: 0xC2F70000 = -123.5, 0x00010000 = 2^-133.
            assertArrayEquals(new float[] {1f, -123.5f, Float.POSITIVE_INFINITY, 0x1p-133f},
                    c.tensor("bf16").toFloatArray());
            // Source: OFP8 rev 1.0: E4M3 0x7E = 448, 0x01 = 2^-9, 0x7F = NaN, 0x38 = 1, 0xB8 = -1.
            float[] e4 = c.tensor("e4m3").toFloatArray();
            assertEquals(448f, e4[0]);
            assertEquals(0x1p-9f, e4[1]);
            assertTrue(Float.isNaN(e4[2]));
            assertEquals(1f, e4[3]);
            assertEquals(-1f, e4[4]);
            // Source: OFP8 rev 1.0: E5M2 0x7B = 57344, 0x7C = inf, 0x3C = 1, 0x01 = 2^-16.
            assertArrayEquals(new float[] {57344f, Float.POSITIVE_INFINITY, 1f, 0x1p-16f},
                    c.tensor("e5m2").toFloatArray());
            // Source: IEEE 754 round to nearest even: 2^53 + 1 -> 2^53, 2^24 + 1 -> 2^24.
            assertArrayEquals(new float[] {0x1p53f, -5f}, c.tensor("i64").toFloatArray());
            assertArrayEquals(new float[] {16777216f, -0x1p31f}, c.tensor("i32").toFloatArray());
            assertArrayEquals(new float[] {-32768f, 1234f}, c.tensor("i16").toFloatArray());
            assertArrayEquals(new float[] {-128f, 127f}, c.tensor("i8").toFloatArray());
            assertArrayEquals(new float[] {255f, 0f}, c.tensor("u8").toFloatArray());
            assertArrayEquals(new float[] {0f, 1f, 1f}, c.tensor("bool").toFloatArray(), "non-zero byte is true");
            assertArrayEquals(new int[] {0, 7}, c.tensor("empty").shape());
            assertEquals(0, c.tensor("empty").size());
            assertArrayEquals(new int[0], c.tensor("scalar").shape());
            assertEquals(42f, c.tensor("scalar").getFlat(0));
            for (String n : c.names()) {
                assertEquals(DType.valueOf(n.equals("e4m3") ? "F8_E4M3" : n.equals("e5m2") ? "F8_E5M2"
                        : n.equals("empty") || n.equals("scalar") ? "F32" : n.toUpperCase(java.util.Locale.ROOT)),
                        c.tensor(n).dtype(), n);
                assertEquals(n, c.tensor(n).name());
            }
            assertEquals(new TensorInfo("bf16", DType.BF16, new long[] {4}, 4), c.info("bf16"));
            assertEquals(8, c.info("bf16").byteSize());
        }
    }

    @Test
    void tensorsAreLazyAndReadingNeverModifiesTheFile() throws IOException {
        Path file = everyDtype(IoFixtures.tempDir());
        Files.setLastModifiedTime(file, FileTime.fromMillis(1_000_000_000_000L));
        byte[] before = Files.readAllBytes(file);
        try (Checkpoint c = Checkpoint.open(file)) {
            Tensor t = c.tensor("f16");
            assertFalse(t.isLoaded());
            assertTrue(t.toString().contains("not loaded"));
            t.toFloatArray();
            assertTrue(t.isLoaded());
            for (String n : c.names()) {
                c.tensor(n).toFloatArray();
            }
        }
        assertArrayEquals(before, Files.readAllBytes(file));
        assertEquals(FileTime.fromMillis(1_000_000_000_000L), Files.getLastModifiedTime(file));
    }

    @Test
    void valuesMustBeReadBeforeClose() throws IOException {
        Path file = everyDtype(IoFixtures.tempDir());
        Tensor loaded;
        Tensor unloaded;
        Checkpoint c = Checkpoint.open(file);
        loaded = c.tensor("f32");
        loaded.toFloatArray();
        unloaded = c.tensor("f64");
        c.close();
        c.close(); // idempotent
        assertTrue(c.isClosed());
        assertEquals(4, loaded.toFloatArray().length, "values read before close stay usable");
        IllegalStateException e = assertThrows(IllegalStateException.class, unloaded::toFloatArray);
        assertTrue(e.getMessage().contains("tensor 'f64'") && e.getMessage().contains("closed"), e.getMessage());
    }

    @Test
    void unknownNameListsTheClosestNames() throws IOException {
        Path file = everyDtype(IoFixtures.tempDir());
        try (Checkpoint c = Checkpoint.open(file)) {
            IllegalArgumentException e = assertThrows(IllegalArgumentException.class, () -> c.tensor("bf61"));
            assertTrue(e.getMessage().startsWith(file + ": no tensor 'bf61'"), e.getMessage());
            assertTrue(e.getMessage().contains("'bf16'") && e.getMessage().contains("14 tensors"), e.getMessage());
            assertFalse(c.contains("bf61"));
            assertTrue(c.contains("bf16"));
        }
    }

    @Test
    void readerIsChosenByMagicBytesWhenTheExtensionIsUnknown() throws IOException {
        Path dir = IoFixtures.tempDir();
        Path renamed = IoFixtures.write(dir, "weights.bin",
                IoFixtures.safetensors("{\"w\":{\"dtype\":\"F32\",\"shape\":[1],\"data_offsets\":[0,4]}}",
                        IoFixtures.f32(3f)));
        try (Checkpoint c = Checkpoint.open(renamed)) {
            assertEquals("safetensors", c.format());
            assertEquals(3f, c.tensor("w").getFlat(0));
        }
        Path npy = dir.resolve("bias.data");
        Files.copy(IoFixtures.golden("le_f4.npy"), npy);
        try (Checkpoint c = Checkpoint.open(npy)) {
            assertEquals("npy", c.format());
            assertEquals(List.of("bias"), c.names());
        }
    }

    @Test
    void shardedIndexOpensAsOneCheckpoint() throws IOException {
        Path dir = IoFixtures.tempDir();
        IoFixtures.write(dir, "m-1.safetensors", IoFixtures.safetensors(
                "{\"__metadata__\":{\"format\":\"pt\"},\"a\":{\"dtype\":\"F32\",\"shape\":[2],\"data_offsets\":[0,8]},"
                        + "\"unlisted\":{\"dtype\":\"F32\",\"shape\":[1],\"data_offsets\":[8,12]}}",
                IoFixtures.f32(1f, 2f, 9f)));
        IoFixtures.write(dir, "m-2.safetensors", IoFixtures.safetensors(
                "{\"b\":{\"dtype\":\"BF16\",\"shape\":[1],\"data_offsets\":[0,2]}}", new byte[] {(byte) 0x80, 0x3F}));
        Path index = IoFixtures.write(dir, "m.safetensors.index.json", ("{\"metadata\":{\"total_size\":14},"
                + "\"weight_map\":{\"b\":\"m-2.safetensors\",\"a\":\"m-1.safetensors\"}}").getBytes(StandardCharsets.UTF_8));
        try (Checkpoint c = Checkpoint.open(index)) {
            assertEquals("safetensors (sharded)", c.format());
            assertEquals(List.of("b", "a"), c.names(), "weight_map order; unlisted tensors are not part of it");
            assertArrayEquals(new float[] {1f, 2f}, c.tensor("a").toFloatArray());
            assertArrayEquals(new float[] {1f}, c.tensor("b").toFloatArray());
            assertEquals(Map.of("total_size", "14", "format", "pt"), c.metadata());
            assertEquals(index, c.path());
        }
    }

    @Test
    void mapsDataInPiecesAcrossChunkBoundaries() throws IOException {
        // Exercises the several-mappings path (used for regions over 1 GiB) with 24-byte pieces.
        Path file = IoFixtures.tempDir().resolve("chunks.bin");
        float[] want = dev.rungbook.testing.Fixtures.gaussian(7, 101);
        ByteBuffer b = ByteBuffer.allocate(3 + 8 * want.length).order(ByteOrder.BIG_ENDIAN);
        b.put(new byte[3]);
        for (float x : want) {
            b.putDouble(x);
        }
        Files.write(file, b.array());
        try (FileChannel ch = FileChannel.open(file, StandardOpenOption.READ)) {
            float[] got = new float[want.length];
            Decode.fromChannel(ch, 3, DType.F64, ByteOrder.BIG_ENDIAN, got, 24);
            assertArrayEquals(want, got);
        }
    }

    @Test
    void fileOverTwoGibibytesListsAHugeTensorAndLoadsOneBeyondTheFirstMapping() throws IOException {
        // A sparse file: 2^31 U8 elements (too many for one tensor) then a small F32 tensor past the 2 GiB mark.
        Path file = IoFixtures.tempDir().resolve("huge.safetensors");
        long big = 1L << 31;
        String header = "{\"huge\":{\"dtype\":\"U8\",\"shape\":[" + big + "],\"data_offsets\":[0," + big + "]},"
                + "\"tail\":{\"dtype\":\"F32\",\"shape\":[2],\"data_offsets\":[" + big + "," + (big + 8) + "]}}";
        byte[] head = IoFixtures.safetensors(header, new byte[0]);
        try (FileChannel ch = FileChannel.open(file, StandardOpenOption.CREATE_NEW, StandardOpenOption.WRITE)) {
            ch.write(ByteBuffer.wrap(head));
            ch.write(ByteBuffer.wrap(IoFixtures.f32(-7.25f, 1e-3f)), head.length + big);
        }
        try (Checkpoint c = Checkpoint.open(file)) {
            assertEquals(List.of("huge", "tail"), c.names());
            assertEquals(big, c.info("huge").elementCount());
            assertFalse(c.info("huge").fitsInTensor());
            CheckpointFormatException e = assertThrows(CheckpointFormatException.class, () -> c.tensor("huge"));
            assertEquals("huge", e.tensor().orElseThrow());
            assertTrue(e.getMessage().contains("2147483648 elements"), e.getMessage());
            assertArrayEquals(new float[] {-7.25f, 1e-3f}, c.tensor("tail").toFloatArray());
        } finally {
            Files.delete(file);
        }
    }
}
