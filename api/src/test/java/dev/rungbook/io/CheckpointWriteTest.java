package dev.rungbook.io;

import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertFalse;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import com.google.gson.JsonObject;
import com.google.gson.JsonParser;
import dev.rungbook.tensor.DType;
import dev.rungbook.tensor.FloatFormat;
import dev.rungbook.tensor.Tensor;
import dev.rungbook.testing.Fixtures;
import java.io.IOException;
import java.nio.ByteBuffer;
import java.nio.ByteOrder;
import java.nio.charset.StandardCharsets;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.LinkedHashMap;
import java.util.List;
import java.util.Map;
import java.util.stream.Collectors;
import java.util.stream.Stream;
import org.junit.jupiter.api.BeforeEach;
import org.junit.jupiter.api.Test;

class CheckpointWriteTest {
    private Path dir;

    @BeforeEach
    void setUp() throws IOException {
        dir = IoFixtures.tempDir();
    }

    /** Every value of a narrow format's grid: decode of every code (NaN codes give NaN). */
    private static float[] grid(FloatFormat f) {
        float[] v = new float[1 << f.bitWidth()];
        for (int c = 0; c < v.length; c++) {
            v[c] = f.decode(c);
        }
        return v;
    }

    private static float[] specials() {
        float[] g = Fixtures.gaussian(11, 1000);
        float[] s = {0f, -0f, Float.NaN, Float.POSITIVE_INFINITY, Float.NEGATIVE_INFINITY, Float.MIN_VALUE,
            -Float.MIN_NORMAL, Float.MAX_VALUE, -Float.MAX_VALUE, 1e-40f, 3.4e38f};
        float[] v = new float[g.length + s.length];
        System.arraycopy(s, 0, v, 0, s.length);
        System.arraycopy(g, 0, v, s.length, g.length);
        return v;
    }

    private static void assertBitExact(String what, float[] want, float[] got) {
        assertEquals(want.length, got.length, what);
        for (int i = 0; i < want.length; i++) {
            if (Float.isNaN(want[i])) {
                assertTrue(Float.isNaN(got[i]), what + "[" + i + "]");
            } else {
                assertEquals(Float.floatToRawIntBits(want[i]), Float.floatToRawIntBits(got[i]),
                        what + "[" + i + "] " + want[i] + " vs " + got[i]);
            }
        }
    }

    private Map<String, Tensor> everyFloatDtype() {
        Map<String, Tensor> m = new LinkedHashMap<>();
        float[] sp = specials();
        m.put("f32", Tensor.of(sp, sp.length));
        m.put("f64", Tensor.of(sp, sp.length).withDType(DType.F64));
        m.put("f16", Tensor.of(grid(FloatFormat.F16), 256, 256).withDType(DType.F16));
        m.put("bf16", Tensor.of(grid(FloatFormat.BF16), 65536).withDType(DType.BF16));
        m.put("e4m3", Tensor.of(grid(FloatFormat.E4M3), 16, 16).withDType(DType.F8_E4M3));
        m.put("e5m2", Tensor.of(grid(FloatFormat.E5M2), 2, 8, 16).withDType(DType.F8_E5M2));
        return m;
    }

    @Test
    void roundTripIsBitExactForEveryFloatDtype() {
        Path file = dir.resolve("floats.safetensors");
        Map<String, Tensor> in = everyFloatDtype();
        Checkpoint.write(file, in, Map.of("made by", "CheckpointWriteTest", "\u00fcnicode", "\u2713"));
        try (Checkpoint c = Checkpoint.open(file)) {
            assertEquals(in.keySet().stream().sorted().collect(Collectors.toList()), c.names(), "name order");
            assertEquals(Map.of("made by", "CheckpointWriteTest", "\u00fcnicode", "\u2713"), c.metadata());
            for (Map.Entry<String, Tensor> e : in.entrySet()) {
                Tensor back = c.tensor(e.getKey());
                assertEquals(e.getValue().dtype(), back.dtype(), e.getKey());
                assertArrayEquals(e.getValue().shape(), back.shape(), e.getKey());
                assertBitExact(e.getKey(), e.getValue().toFloatArray(), back.toFloatArray());
            }
        }
    }

    @Test
    void narrowCodesOnDiskAreTheFormatCodes() throws IOException {
        // Every non-NaN code c of each 8/16-bit format decodes to v; writing v must store exactly c.
        Path file = dir.resolve("codes.safetensors");
        Map<String, Tensor> in = everyFloatDtype();
        Checkpoint.write(file, in, Map.of());
        byte[] all = Files.readAllBytes(file);
        ByteBuffer b = ByteBuffer.wrap(all).order(ByteOrder.LITTLE_ENDIAN);
        int n = (int) b.getLong(0);
        JsonObject header = JsonParser.parseString(new String(all, 8, n, StandardCharsets.UTF_8)).getAsJsonObject();
        Object[][] cases = {{"f16", FloatFormat.F16}, {"bf16", FloatFormat.BF16}, {"e4m3", FloatFormat.E4M3},
            {"e5m2", FloatFormat.E5M2}};
        for (Object[] cs : cases) {
            FloatFormat f = (FloatFormat) cs[1];
            long begin = header.getAsJsonObject((String) cs[0]).getAsJsonArray("data_offsets").get(0).getAsLong();
            int pos = (int) (8 + n + begin);
            for (int code = 0; code < 1 << f.bitWidth(); code++) {
                if (Float.isNaN(f.decode(code))) {
                    continue;
                }
                int stored = f.bitWidth() == 16 ? b.getShort(pos + 2 * code) & 0xFFFF : all[pos + code] & 0xFF;
                assertEquals(code, stored, cs[0] + " code " + code);
            }
        }
    }

    @Test
    void headerIsPaddedSoDataStartsOnAnEightByteBoundary() throws IOException {
        for (String name : List.of("a", "ab", "abc", "abcd", "abcde", "abcdef", "abcdefg", "abcdefgh")) {
            Path file = dir.resolve(name + ".safetensors");
            Checkpoint.write(file, Map.of(name, Tensor.of(new float[] {1, 2, 3}, 3)), Map.of());
            byte[] all = Files.readAllBytes(file);
            long n = ByteBuffer.wrap(all).order(ByteOrder.LITTLE_ENDIAN).getLong(0);
            assertEquals(0, (8 + n) % 8, name);
            assertEquals(8 + n + 12, all.length);
            String header = new String(all, 8, (int) n, StandardCharsets.UTF_8);
            assertTrue(header.startsWith("{") && header.strip().endsWith("}"), header);
            assertTrue(header.chars().skip(header.strip().length()).allMatch(ch -> ch == ' '), "padded with spaces");
        }
    }

    @Test
    void offFormatValuesRoundToNearestEven() {
        // Source: IEEE 754 round to nearest, ties to even: 1 + 2^-11 lies halfway between the binary16 neighbours
        // 1 and 1 + 2^-10 and goes to 1 (even fraction); 1 + 3 * 2^-11 goes to 1 + 2^-9.
        float[] v = {1 + 0x1p-11f, 1 + 3 * 0x1p-11f, 0.1f};
        Path file = dir.resolve("round.safetensors");
        Checkpoint.write(file, Map.of("h", Tensor.of(v, 3).withDType(DType.F16),
                "b", Tensor.of(v, 3).withDType(DType.BF16)), Map.of());
        try (Checkpoint c = Checkpoint.open(file)) {
            float[] h = c.tensor("h").toFloatArray();
            assertEquals(1f, h[0]);
            assertEquals(1 + 0x1p-9f, h[1]);
            assertEquals(FloatFormat.F16.round(0.1f), h[2]);
            float[] b = c.tensor("b").toFloatArray();
            for (int i = 0; i < v.length; i++) {
                assertEquals(FloatFormat.BF16.round(v[i]), b[i]);
            }
        }
    }

    @Test
    void refusesValuesThatWouldOverflowTheTargetType() {
        Path file = dir.resolve("o.safetensors");
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class, () -> Checkpoint.write(file,
                Map.of("w", Tensor.of(new float[] {1f, 70000f}, 2).withDType(DType.F16)), Map.of()));
        assertTrue(e.getMessage().contains("tensor 'w'") && e.getMessage().contains("70000")
                && e.getMessage().contains("index 1") && e.getMessage().contains("overflows F16"), e.getMessage());
        e = assertThrows(IllegalArgumentException.class, () -> Checkpoint.write(file, Map.of("w",
                Tensor.of(new float[] {Float.POSITIVE_INFINITY}, 1).withDType(DType.F8_E4M3)), Map.of()));
        assertTrue(e.getMessage().contains("no infinity"), e.getMessage());
        assertFalse(Files.exists(file));
    }

    @Test
    void integerTagsWriteExactIntegersOnly() {
        Path file = dir.resolve("ints.safetensors");
        Map<String, Tensor> in = new LinkedHashMap<>();
        in.put("i64", Tensor.of(new float[] {0x1p62f, -0x1p63f, 5}, 3).withDType(DType.I64));
        in.put("i32", Tensor.of(new float[] {-0x1p31f, 16777216f, -3}, 3).withDType(DType.I32));
        in.put("i16", Tensor.of(new float[] {-32768, 32767, 0}, 3).withDType(DType.I16));
        in.put("i8", Tensor.of(new float[] {-128, 127, -0f}, 3).withDType(DType.I8));
        in.put("u8", Tensor.of(new float[] {0, 255, 7}, 3).withDType(DType.U8));
        in.put("bool", Tensor.of(new float[] {0, 1, 1}, 3).withDType(DType.BOOL));
        Checkpoint.write(file, in, Map.of());
        try (Checkpoint c = Checkpoint.open(file)) {
            for (Map.Entry<String, Tensor> e : in.entrySet()) {
                assertEquals(e.getValue().dtype(), c.tensor(e.getKey()).dtype());
                float[] want = e.getValue().toFloatArray();
                want[2] = want[2] == 0 ? 0f : want[2]; // -0 is written as integer 0
                assertArrayEquals(want, c.tensor(e.getKey()).toFloatArray(), e.getKey());
            }
        }
        Object[][] bad = {{DType.I32, 2.5f, "not an integer"}, {DType.I8, 128f, "outside the range"},
            {DType.U8, -1f, "outside the range"}, {DType.BOOL, 2f, "outside the range"},
            {DType.I16, Float.NaN, "not an integer"}, {DType.I64, 0x1p63f, "outside the range"},
            {DType.I32, Float.POSITIVE_INFINITY, "not an integer"}};
        for (Object[] b : bad) {
            Path f = dir.resolve("bad.safetensors");
            IllegalArgumentException e = assertThrows(IllegalArgumentException.class, () -> Checkpoint.write(f,
                    Map.of("t", Tensor.of(new float[] {1, (Float) b[1]}, 2).withDType((DType) b[0])), Map.of()));
            assertTrue(e.getMessage().contains((String) b[2]) && e.getMessage().contains("tensor 't'"),
                    e.getMessage());
        }
    }

    @Test
    void npzRoundTripIsBitExactForNumpyTypes() {
        Path file = dir.resolve("arrays.npz");
        Map<String, Tensor> in = new LinkedHashMap<>();
        float[] sp = specials();
        in.put("w", Tensor.of(sp, sp.length));
        in.put("w64", Tensor.of(sp, sp.length).withDType(DType.F64));
        in.put("h", Tensor.of(grid(FloatFormat.F16), 16, 64, 64).withDType(DType.F16));
        in.put("scalar", Tensor.of(new float[] {4.5f}));
        in.put("empty", Tensor.of(new float[0], 0, 5));
        in.put("codes", Tensor.of(new float[] {-128, 0, 127}, 3).withDType(DType.I8));
        in.put("mask", Tensor.of(new float[] {1, 0}, 2).withDType(DType.BOOL));
        Checkpoint.write(file, in);
        try (Checkpoint c = Checkpoint.open(file)) {
            assertEquals("npz", c.format());
            assertEquals(in.keySet().stream().sorted().collect(Collectors.toList()), c.names());
            for (Map.Entry<String, Tensor> e : in.entrySet()) {
                Tensor back = c.tensor(e.getKey());
                assertEquals(e.getValue().dtype(), back.dtype(), e.getKey());
                assertArrayEquals(e.getValue().shape(), back.shape(), e.getKey());
                assertBitExact(e.getKey(), e.getValue().toFloatArray(), back.toFloatArray());
            }
        }
    }

    @Test
    void npzRefusesTypesAndMetadataItCannotHold() {
        Path file = dir.resolve("x.npz");
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class, () -> Checkpoint.write(file,
                Map.of("b", Tensor.of(new float[] {1}, 1).withDType(DType.BF16))));
        assertTrue(e.getMessage().contains("tensor 'b'") && e.getMessage().contains("no BF16"), e.getMessage());
        e = assertThrows(IllegalArgumentException.class, () -> Checkpoint.write(file,
                Map.of("a", Tensor.of(new float[] {1}, 1)), Map.of("k", "v")));
        assertTrue(e.getMessage().contains("metadata"), e.getMessage());
        assertFalse(Files.exists(file));
    }

    @Test
    void refusesUnknownExtensionsAndReservedNames() {
        Map<String, Tensor> one = Map.of("a", Tensor.of(new float[] {1}, 1));
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                () -> Checkpoint.write(dir.resolve("w.pt"), one));
        assertTrue(e.getMessage().contains("w.pt") && e.getMessage().contains(".safetensors or .npz"),
                e.getMessage());
        assertThrows(IllegalArgumentException.class, () -> Checkpoint.write(dir.resolve("w.safetensors"),
                Map.of("__metadata__", Tensor.of(new float[] {1}, 1))));
    }

    private List<Path> folder() throws IOException {
        try (Stream<Path> s = Files.list(dir)) {
            return s.sorted().collect(Collectors.toList());
        }
    }

    @Test
    void failedWriteLeavesTheOldFileAndNoTemporaryFile() throws IOException {
        for (String ext : List.of(".safetensors", ".npz")) {
            Path file = dir.resolve("keep" + ext);
            Checkpoint.write(file, Map.of("old", Tensor.of(new float[] {1, 2, 3}, 3)));
            byte[] before = Files.readAllBytes(file);
            // "a" is written first (name order), then "b" fails validation half-way through the file.
            Map<String, Tensor> in = new LinkedHashMap<>();
            in.put("a", Tensor.of(Fixtures.gaussian(3, 100_000), 100_000));
            in.put("b", Tensor.of(new float[] {1, 2, 0.5f}, 3).withDType(DType.I8));
            assertThrows(IllegalArgumentException.class, () -> Checkpoint.write(file, in));
            assertArrayEquals(before, Files.readAllBytes(file), ext);
            String base = file.getFileName().toString();
            assertEquals(List.of(file), folder().stream().filter(p -> p.getFileName().toString().contains(base))
                    .collect(Collectors.toList()), "no temporary file left: " + folder());
        }
    }

    @Test
    void failingLazyTensorMidWayLeavesNoFile() throws IOException {
        Path file = dir.resolve("new.safetensors");
        Map<String, Tensor> in = new LinkedHashMap<>();
        in.put("a", Tensor.of(new float[] {1, 2}, 2));
        in.put("b", Tensor.lazy("b", DType.F32, new int[] {2}, () -> {
            throw new IllegalStateException("source vanished");
        }));
        IllegalStateException e = assertThrows(IllegalStateException.class, () -> Checkpoint.write(file, in));
        assertEquals("source vanished", e.getMessage());
        assertEquals(List.of(), folder(), "neither target nor temporary file");
    }

    @Test
    void refusesToOverwriteAFileThatAnOpenCheckpointReads() throws IOException {
        Path file = dir.resolve("in.safetensors");
        Checkpoint.write(file, Map.of("w", Tensor.of(new float[] {1, 2}, 2)));
        Path link = dir.resolve("alias.safetensors");
        Files.createSymbolicLink(link, file.toAbsolutePath());
        try (Checkpoint c = Checkpoint.open(file)) {
            Tensor w = c.tensor("w");
            Map<String, Tensor> out = Map.of("w", w);
            IllegalStateException e = assertThrows(IllegalStateException.class, () -> Checkpoint.write(file, out));
            assertTrue(e.getMessage().contains(file.toString()) && e.getMessage().contains("open Checkpoint"),
                    e.getMessage());
            assertThrows(IllegalStateException.class, () -> Checkpoint.write(link, out), "via a symbolic link too");
            w.toFloatArray();
        }
        Checkpoint.write(file, Map.of("w", Tensor.of(new float[] {3}, 1)));
        try (Checkpoint c = Checkpoint.open(file)) {
            assertArrayEquals(new float[] {3}, c.tensor("w").toFloatArray());
        }
    }

    @Test
    void writesTensorsReadFromAnotherCheckpoint() {
        // Convert a NumPy golden file to safetensors and back to .npz; values stay bit-identical.
        Path st = dir.resolve("conv.safetensors");
        Path npz = dir.resolve("conv.npz");
        Map<String, Tensor> in = new LinkedHashMap<>();
        try (Checkpoint c = Checkpoint.open(IoFixtures.golden("deflated.npz"))) {
            for (String n : c.names()) {
                // "count" holds I64 values near 2^63, which float32 rounds to 2^63 (out of I64 range, documented)
                if (!n.equals("count")) {
                    in.put(n, c.tensor(n));
                }
            }
            Checkpoint.write(st, in);
            assertThrows(IllegalArgumentException.class, () -> Checkpoint.write(npz, Map.of("c", c.tensor("count"))));
        }
        try (Checkpoint c = Checkpoint.open(st)) {
            Map<String, Tensor> again = c.tensors();
            assertEquals(c.names(), List.copyOf(again.keySet()));
            for (String n : c.names()) {
                assertBitExact(n, in.get(n).toFloatArray(), again.get(n).toFloatArray());
            }
            Checkpoint.write(npz, again);
        }
        try (Checkpoint c = Checkpoint.open(npz)) {
            for (String n : c.names()) {
                assertEquals(in.get(n).dtype(), c.tensor(n).dtype());
                assertBitExact(n, in.get(n).toFloatArray(), c.tensor(n).toFloatArray());
            }
        }
    }
}
