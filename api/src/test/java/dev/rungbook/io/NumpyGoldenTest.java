package dev.rungbook.io;

import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertFalse;
import static org.junit.jupiter.api.Assertions.assertTrue;

import com.google.gson.JsonElement;
import com.google.gson.JsonObject;
import com.google.gson.JsonParser;
import dev.rungbook.tensor.DType;
import dev.rungbook.tensor.Tensor;
import java.io.IOException;
import java.nio.file.Files;
import java.util.ArrayList;
import java.util.List;
import java.util.Map;
import org.junit.jupiter.api.Test;

/**
 * Reads the committed golden files and compares with the float32 bit patterns NumPy itself produced for
 * {@code arr.astype(np.float32)}.
 */
class NumpyGoldenTest {
    // Source: golden/*.npy|npz and golden/expected.json, written by NumPy (np.save, np.lib.format.write_array,
    // np.savez, np.savez_compressed) via src/test/resources/io/make_golden.py.
    private static JsonObject expected() throws IOException {
        return JsonParser.parseString(Files.readString(IoFixtures.golden("expected.json"))).getAsJsonObject()
                .getAsJsonObject("files");
    }

    static void assertBits(String what, JsonObject exp, Tensor t) {
        List<Integer> shape = new ArrayList<>();
        exp.getAsJsonArray("shape").forEach(e -> shape.add(e.getAsInt()));
        assertArrayEquals(shape.stream().mapToInt(Integer::intValue).toArray(), t.shape(), what + " shape");
        float[] v = t.toFloatArray();
        var bits = exp.getAsJsonArray("f32_bits");
        assertEquals(bits.size(), v.length, what + " size");
        for (int i = 0; i < v.length; i++) {
            int want = (int) bits.get(i).getAsLong();
            float w = Float.intBitsToFloat(want);
            if (Float.isNaN(w)) {
                assertTrue(Float.isNaN(v[i]), what + "[" + i + "] should be NaN, got " + v[i]);
            } else {
                assertEquals(want, Float.floatToRawIntBits(v[i]), what + "[" + i + "]: want " + w + " got " + v[i]);
            }
        }
    }

    @Test
    void readsEveryGoldenFileAsNumpyConvertsIt() throws IOException {
        JsonObject files = expected();
        assertTrue(files.size() >= 25, "golden set is complete");
        for (Map.Entry<String, JsonElement> f : files.entrySet()) {
            try (Checkpoint c = Checkpoint.open(IoFixtures.golden(f.getKey()))) {
                JsonObject arrays = f.getValue().getAsJsonObject();
                assertEquals(arrays.keySet(), new java.util.HashSet<>(c.names()), f.getKey());
                for (String name : arrays.keySet()) {
                    assertBits(f.getKey() + ":" + name, arrays.getAsJsonObject(name), c.tensor(name));
                }
            }
        }
    }

    @Test
    void tagsEachArrayWithItsNumpyDtype() {
        String[][] cases = {{"le_f8", "F64"}, {"le_f4", "F32"}, {"le_f2", "F16"}, {"le_i8", "I64"},
            {"le_i4", "I32"}, {"le_i2", "I16"}, {"le_i1", "I8"}, {"le_u1", "U8"}, {"le_b1", "BOOL"},
            {"be_f8", "F64"}, {"be_i2", "I16"}};
        for (String[] c : cases) {
            try (Checkpoint ck = Checkpoint.open(IoFixtures.golden(c[0] + ".npy"))) {
                assertEquals("npy", ck.format());
                assertEquals(List.of(c[0]), ck.names(), "named after the file stem");
                assertEquals(DType.valueOf(c[1]), ck.tensor(c[0]).dtype(), c[0]);
                assertEquals(Map.of(), ck.metadata());
            }
        }
    }

    @Test
    void fortranOrderIsReorderedToRowMajor() {
        // Source: make_golden.py fills both files from base = arange(24).reshape(2, 3, 4) * 0.5 - 3, so the
        // row-major element (i, j, k) is (12 i + 4 j + k) * 0.5 - 3 whatever the storage order.
        for (String f : List.of("fortran_234_le.npy", "fortran_234_be.npy", "c_order_234.npy")) {
            try (Checkpoint c = Checkpoint.open(IoFixtures.golden(f))) {
                Tensor t = c.tensor(c.names().get(0));
                assertArrayEquals(new int[] {2, 3, 4}, t.shape());
                for (int i = 0; i < 24; i++) {
                    assertEquals(i * 0.5f - 3f, t.getFlat(i), f + " element " + i);
                }
            }
        }
    }

    @Test
    void npzKeysDropTheNpySuffixAndKeepArchiveOrder() {
        for (String f : List.of("stored.npz", "deflated.npz")) {
            try (Checkpoint c = Checkpoint.open(IoFixtures.golden(f))) {
                assertEquals("npz", c.format());
                assertEquals(List.of("weight", "bias", "layer.1/scale", "count"), c.names(), f);
                assertEquals(DType.F16, c.tensor("bias").dtype());
                assertEquals(DType.F64, c.tensor("layer.1/scale").dtype());
            }
        }
    }

    @Test
    void tensorsAreLazyUntilFirstUse() {
        try (Checkpoint c = Checkpoint.open(IoFixtures.golden("deflated.npz"))) {
            Tensor t = c.tensor("weight");
            assertFalse(t.isLoaded());
            assertArrayEquals(new int[] {3, 4}, t.shape());
            t.getFlat(0);
            assertTrue(t.isLoaded());
        }
    }

    @Test
    void refusesObjectArrays() {
        IoFixtures.assertRefused(IoFixtures.golden("object.npy"), "object arrays", "unpickling");
    }

    @Test
    void scalarAndEmptyArrays() {
        try (Checkpoint c = Checkpoint.open(IoFixtures.golden("scalar_f8.npy"))) {
            Tensor t = c.tensor("scalar_f8");
            assertArrayEquals(new int[0], t.shape());
            assertEquals((float) 2.718281828459045, t.getFlat(0));
        }
        try (Checkpoint c = Checkpoint.open(IoFixtures.golden("empty_0x3_f4.npy"))) {
            Tensor t = c.tensor("empty_0x3_f4");
            assertArrayEquals(new int[] {0, 3}, t.shape());
            assertEquals(0, t.toFloatArray().length);
        }
    }
}
