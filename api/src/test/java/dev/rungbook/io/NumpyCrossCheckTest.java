package dev.rungbook.io;

import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertTrue;
import static org.junit.jupiter.api.Assumptions.assumeTrue;

import com.google.gson.JsonElement;
import com.google.gson.JsonObject;
import com.google.gson.JsonParser;
import dev.rungbook.tensor.DType;
import dev.rungbook.tensor.FloatFormat;
import dev.rungbook.tensor.Tensor;
import dev.rungbook.testing.Fixtures;
import java.io.IOException;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.LinkedHashMap;
import java.util.Map;
import org.junit.jupiter.api.BeforeAll;
import org.junit.jupiter.api.Test;

/**
 * Cross-checks with a live NumPy (skipped when python3 with numpy is absent): NumPy writes fresh random files that
 * Rungbook reads, and NumPy reads the files Rungbook writes (safetensors parsed by hand in a few lines of Python, since
 * no safetensors package is assumed).
 */
class NumpyCrossCheckTest {
    private static String python;

    @BeforeAll
    static void findPython() {
        python = Fixtures.pythonWithNumpy();
    }

    // Source: NumPy's own writers (np.save, np.lib.format.write_array, np.savez, np.savez_compressed) and its
    // astype(np.float32) conversion are the reference.
    private static final String MAKE = String.join("\n",
            "import json, os, sys",
            "import numpy as np",
            "out = sys.argv[1]",
            "rng = np.random.default_rng(20261201)",
            "man = {}",
            "def bits(a):",
            "    return [int(x) for x in np.ascontiguousarray(a.astype(np.float32)).reshape(-1).view(np.uint32)]",
            "def put(f, k, a):",
            "    man.setdefault(f, {})[k] = {'shape': list(a.shape), 'f32_bits': bits(a), 'descr': a.dtype.str}",
            "def make(code, shape):",
            "    if code[1] == 'f':",
            "        a = rng.standard_normal(shape) * 10.0 ** rng.integers(-6, 4, shape)",
            "    elif code[1] == 'b':",
            "        a = rng.integers(0, 2, shape).astype(bool)",
            "    else:",
            "        info = np.iinfo(code)",
            "        a = rng.integers(info.min, info.max, shape, endpoint=True, dtype=np.dtype(code).newbyteorder('='))",
            "    return a.astype(code)",
            "i = 0",
            "for code in ['<f8','>f8','<f4','>f4','<f2','>f2','<i8','>i8','<i4','>i4','<i2','>i2','|i1','|u1','|b1']:",
            "    for fortran in (False, True):",
            "        for version in ((1, 0), (2, 0), (3, 0)):",
            "            shape = tuple(int(d) for d in rng.integers(1, 6, int(rng.integers(1, 4))))",
            "            a = make(code, shape)",
            "            a = np.asfortranarray(a) if fortran else np.ascontiguousarray(a)",
            "            name = 'a%d' % i; i += 1",
            "            with open(os.path.join(out, name + '.npy'), 'wb') as f:",
            "                np.lib.format.write_array(f, a, version=version, allow_pickle=False)",
            "            put(name + '.npy', name, a)",
            "members = {'m%d' % k: np.asfortranarray(make(c, (3, 4, 2))) if k % 2 else make(c, (7,))",
            "           for k, c in enumerate(['<f4', '>f8', '<f2', '<i4', '|u1', '>i2'])}",
            "np.savez(os.path.join(out, 's.npz'), **members)",
            "np.savez_compressed(os.path.join(out, 'd.npz'), **members)",
            "for f in ('s.npz', 'd.npz'):",
            "    for k, a in members.items():",
            "        put(f, k, a)",
            "json.dump(man, open(os.path.join(out, 'manifest.json'), 'w'))");

    @Test
    void readsFreshNumpyFilesExactlyAsNumpyConvertsThem() throws IOException {
        assumeTrue(python != null, "python3 with numpy not found");
        Path dir = IoFixtures.tempDir();
        Fixtures.runPython(python, MAKE, dir.toString());
        JsonObject man = JsonParser.parseString(Files.readString(dir.resolve("manifest.json"))).getAsJsonObject();
        assertEquals(15 * 2 * 3 + 2, man.size());
        for (Map.Entry<String, JsonElement> f : man.entrySet()) {
            try (Checkpoint c = Checkpoint.open(dir.resolve(f.getKey()))) {
                for (Map.Entry<String, JsonElement> a : f.getValue().getAsJsonObject().entrySet()) {
                    JsonObject exp = a.getValue().getAsJsonObject();
                    Tensor t = c.tensor(a.getKey());
                    NumpyGoldenTest.assertBits(f.getKey() + ":" + a.getKey(), exp, t);
                    String code = exp.get("descr").getAsString().substring(1);
                    assertEquals(DType.fromNumpyCode(code).orElseThrow(), t.dtype(), f.getKey());
                }
            }
        }
    }

    private static final String READ = String.join("\n",
            "import json, sys",
            "import numpy as np",
            "def e4m3(b):",
            "    # OFP8 E4M3: bias 7, subnormals m * 2^-9, S.1111.111 is NaN, no infinities",
            "    b = b.astype(np.int64); e = (b >> 3) & 15; m = b & 7",
            "    v = np.where(e == 0, m * 2.0 ** -9, (1 + m / 8.0) * 2.0 ** (e - 7))",
            "    v = np.where((e == 15) & (m == 7), np.nan, v)",
            "    return np.where(b & 0x80, -v, v).astype(np.float32)",
            "dec = {",
            "  'F64': lambda r: np.frombuffer(r, '<f8').astype(np.float32),",
            "  'F32': lambda r: np.frombuffer(r, '<f4'),",
            "  'F16': lambda r: np.frombuffer(r, '<f2').astype(np.float32),",
            "  'BF16': lambda r: (np.frombuffer(r, '<u2').astype(np.uint32) << 16).view(np.float32),",
            "  'F8_E5M2': lambda r: (np.frombuffer(r, 'u1').astype(np.uint16) << 8).view(np.float16).astype(np.float32),",
            "  'F8_E4M3': lambda r: e4m3(np.frombuffer(r, 'u1')),",
            "  'I64': lambda r: np.frombuffer(r, '<i8').astype(np.float32),",
            "  'I32': lambda r: np.frombuffer(r, '<i4').astype(np.float32),",
            "  'I16': lambda r: np.frombuffer(r, '<i2').astype(np.float32),",
            "  'I8': lambda r: np.frombuffer(r, 'i1').astype(np.float32),",
            "  'U8': lambda r: np.frombuffer(r, 'u1').astype(np.float32),",
            "  'BOOL': lambda r: np.frombuffer(r, 'u1').astype(bool).astype(np.float32),",
            "}",
            "def bits(a):",
            "    return [int(x) for x in np.ascontiguousarray(a, dtype=np.float32).reshape(-1).view(np.uint32)]",
            "res = {}",
            "raw = open(sys.argv[1], 'rb').read()",
            "n = int.from_bytes(raw[:8], 'little')",
            "head = json.loads(raw[8:8 + n].decode('utf-8'))",
            "assert (8 + n) % 8 == 0, 'data start not 8-aligned'",
            "data = raw[8 + n:]",
            "meta = head.pop('__metadata__', {})",
            "names = list(head)",
            "assert names == sorted(names), 'not in name order'",
            "pos = 0",
            "for k in names:",
            "    e = head[k]; b, end = e['data_offsets']",
            "    assert b == pos, 'not contiguous at ' + k",
            "    pos = end",
            "    v = dec[e['dtype']](data[b:end]).reshape(e['shape'])",
            "    res[k] = {'shape': list(v.shape), 'f32_bits': bits(v), 'dtype': e['dtype']}",
            "assert pos == len(data), 'trailing data'",
            "npz = np.load(sys.argv[2], allow_pickle=False)",
            "zres = {k: {'shape': list(npz[k].shape), 'f32_bits': bits(npz[k].astype(np.float32)),",
            "            'descr': npz[k].dtype.str} for k in npz.files}",
            "print(json.dumps({'st': res, 'meta': meta, 'npz': zres}))");

    @Test
    void numpyReadsOurFilesBitForBit() throws IOException {
        assumeTrue(python != null, "python3 with numpy not found");
        Path dir = IoFixtures.tempDir();
        float[] g = Fixtures.gaussian(5, 600);
        for (int i = 0; i < g.length; i += 7) {
            g[i] *= 1e4f; // spread the range
        }
        Map<String, Tensor> floats = new LinkedHashMap<>();
        floats.put("w.f32", Tensor.of(g, 20, 30));
        floats.put("w.f64", Tensor.of(g, 600).withDType(DType.F64));
        floats.put("w.f16", Tensor.of(grid(FloatFormat.F16), 65536).withDType(DType.F16));
        floats.put("w.bf16", Tensor.of(grid(FloatFormat.BF16), 256, 256).withDType(DType.BF16));
        floats.put("w.e4m3", Tensor.of(grid(FloatFormat.E4M3), 256).withDType(DType.F8_E4M3));
        floats.put("w.e5m2", Tensor.of(grid(FloatFormat.E5M2), 4, 64).withDType(DType.F8_E5M2));
        floats.put("codes.i8", Tensor.generate(i -> i - 128, 256).withDType(DType.I8));
        floats.put("codes.u8", Tensor.generate(i -> i, 256).withDType(DType.U8));
        floats.put("codes.i16", Tensor.generate(i -> i * 127 - 32768, 517).withDType(DType.I16));
        floats.put("codes.i32", Tensor.generate(i -> i * 8e6f - 0x1p31f, 537).withDType(DType.I32));
        floats.put("codes.i64", Tensor.generate(i -> (i - 50) * 0x1p56f, 100).withDType(DType.I64));
        floats.put("mask", Tensor.generate(i -> i % 3 == 0 ? 1 : 0, 10).withDType(DType.BOOL));
        Path st = dir.resolve("ours.safetensors");
        Checkpoint.write(st, floats, Map.of("producer", "rungbook test"));
        Map<String, Tensor> numpyTypes = new LinkedHashMap<>();
        floats.forEach((k, t) -> {
            if (t.dtype().numpyCode().isPresent()) {
                numpyTypes.put(k, t);
            }
        });
        numpyTypes.put("scalar", Tensor.of(new float[] {-1.25f}));
        Path npz = dir.resolve("ours.npz");
        Checkpoint.write(npz, numpyTypes);

        JsonObject out = JsonParser.parseString(Fixtures.runPython(python, READ, st.toString(), npz.toString()))
                .getAsJsonObject();
        assertEquals("rungbook test", out.getAsJsonObject("meta").get("producer").getAsString());
        JsonObject str = out.getAsJsonObject("st");
        assertEquals(floats.size(), str.size());
        for (Map.Entry<String, Tensor> e : floats.entrySet()) {
            JsonObject got = str.getAsJsonObject(e.getKey());
            assertEquals(e.getValue().dtype().safetensorsName(), got.get("dtype").getAsString());
            NumpyGoldenTest.assertBits("safetensors:" + e.getKey(), got, e.getValue());
        }
        JsonObject z = out.getAsJsonObject("npz");
        assertEquals(numpyTypes.size(), z.size());
        for (Map.Entry<String, Tensor> e : numpyTypes.entrySet()) {
            JsonObject got = z.getAsJsonObject(e.getKey());
            assertTrue(got.get("descr").getAsString().endsWith(e.getValue().dtype().numpyCode().orElseThrow()),
                    e.getKey() + " " + got.get("descr"));
            NumpyGoldenTest.assertBits("npz:" + e.getKey(), got, e.getValue());
        }
        assertArrayEquals(new int[0], numpyTypes.get("scalar").shape());
    }

    private static float[] grid(FloatFormat f) {
        float[] v = new float[1 << f.bitWidth()];
        for (int c = 0; c < v.length; c++) {
            v[c] = f.decode(c);
        }
        return v;
    }
}
