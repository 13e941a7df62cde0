package dev.rungbook.quant;

import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertFalse;
import static org.junit.jupiter.api.Assertions.assertNull;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;
import static org.junit.jupiter.api.Assumptions.assumeTrue;

import com.google.gson.JsonObject;
import com.google.gson.JsonParser;
import dev.rungbook.io.Checkpoint;
import dev.rungbook.round.Calibration;
import dev.rungbook.round.Rounding;
import dev.rungbook.tensor.DType;
import dev.rungbook.tensor.Tensor;
import dev.rungbook.testing.Fixtures;
import java.io.IOException;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.ArrayList;
import java.util.LinkedHashMap;
import java.util.List;
import java.util.Map;
import java.util.Optional;
import java.util.stream.Stream;
import org.junit.jupiter.api.Test;

class ExportTest {
    /** Specs covering every grid kind and every decode rule, with the codes dtype each must get. */
    private static Map<String, DType> specs() {
        Map<String, DType> m = new LinkedHashMap<>();
        m.put("int8", DType.I8);
        m.put("int4 asym per-group(1,16)", DType.I8);
        m.put("uint8 asym per-tensor", DType.U8);
        m.put("uint4 per-channel(0)", DType.U8);
        m.put("int3 midrise per-channel(1)", DType.I8);
        m.put("int12 per-tensor mse(8)", DType.I16);
        m.put("uint16 asym per-tensor", DType.U16);
        m.put("int4 per-group(1,32) stochastic(seed=5) pow2-scale", DType.I8);
        m.put("int6 narrow per-channel(0) p99", DType.I8);
        m.put("fp8-e4m3 per-tensor", DType.U8);
        m.put("fp8-e5m2 per-channel(0) pow2-scale", DType.U8);
        m.put("fp16 per-tensor", DType.U16);
        m.put("bf16 per-channel(0)", DType.U16);
        m.put("fp4-e2m1 unscaled", DType.U8);
        m.put("fp6-e3m2 per-group(1,8)", DType.U8);
        m.put("mxfp4-e2m1", DType.U8);
        m.put("mxfp8-e5m2 block(16)", DType.U8);
        m.put("mxfp6-e2m3", DType.U8);
        m.put("mxint8", DType.I8);
        m.put("nf4 block(32)", DType.U8);
        m.put("log4 per-channel(0)", DType.U8);
        m.put("codebook16 per-channel(0)", DType.U8);
        m.put("codebook300 per-tensor", DType.U16);
        m.put("binary per-channel(0)", DType.I8);
        m.put("ternary(0.5)", DType.I8);
        return m;
    }

    private static Tensor weights() {
        float[] v = Fixtures.gaussian(41, 8 * 64);
        v[5] = 6.5f; // an outlier, so clipping rules and asymmetric grids have work to do
        v[70] = -0.0f;
        v[200] = 0f;
        return Tensor.of(v, 8, 64);
    }

    /** Every spec applied to the test tensor, each result named t0, t1, ... */
    private static List<Quantized> results() {
        Tensor w = weights();
        List<Quantized> out = new ArrayList<>();
        int i = 0;
        for (String s : specs().keySet()) {
            out.add(Quantizer.parse(s).apply(w.withName("t" + i++)));
        }
        // A learned rounding, which has no spec text: its codes still export.
        Calibration cal = Calibration.of(Tensor.of(Fixtures.gaussian(42, 32 * 64), 32, 64));
        out.add(Quantizer.linear(4).rounding(Rounding.errorFeedback(cal)).apply(w.withName("learned")));
        return out;
    }

    private static int[] bits(Tensor t) {
        float[] v = t.toFloatArray();
        int[] b = new int[v.length];
        for (int i = 0; i < v.length; i++) {
            b[i] = Float.floatToRawIntBits(v[i]);
        }
        return b;
    }

    @Test
    void readsBackEveryGridBitForBit() throws IOException {
        Path dir = Fixtures.tempDir("export");
        Path out = dir.resolve("q.safetensors");
        List<Quantized> rs = results();
        Export.write(out, rs);
        List<DType> dtypes = new ArrayList<>(specs().values());
        dtypes.add(DType.I8);
        try (QuantizedCheckpoint q = QuantizedCheckpoint.open(out)) {
            assertEquals(Export.QUANTIZED_FORMAT, q.checkpoint().metadata().get("rungbook.export"));
            for (int i = 0; i < rs.size(); i++) {
                Quantized r = rs.get(i);
                String name = r.source().name();
                String what = name + " " + r.spec().label();
                assertTrue(q.isQuantized(name), what);
                assertEquals(dtypes.get(i), q.checkpoint().info(name + ".codes").dtype(), what);
                assertArrayEquals(r.codes().toIntArray(), q.codes(name), what);
                assertArrayEquals(bits(r.scales()), bits(q.scales(name)), what);
                assertEquals(r.source().rank(), q.scales(name).rank(), what);
                if (r.spec().kind == Quantizer.Kind.LINEAR && !r.spec().symmetric) {
                    assertArrayEquals(r.zeroPoints().toFloatArray(), q.zeroPoints(name).orElseThrow().toFloatArray());
                } else {
                    assertFalse(q.zeroPoints(name).isPresent(), what);
                }
                r.levels().ifPresent(l -> assertArrayEquals(bits(l), bits(q.levels(name).orElseThrow()), what));
                assertArrayEquals(bits(r.dequantized()), bits(q.dequantized(name)), what);
                assertEquals(r.spec().label(), q.label(name).orElseThrow());
                if (SpecText.hasText(r.spec())) {
                    assertEquals(r.spec(), q.spec(name).orElseThrow(), what);
                } else {
                    assertEquals(Optional.empty(), q.spec(name), what);
                }
            }
            assertEquals(rs.size(), q.names().size());
        }
    }

    @Test
    void numpyReproducesCodesScalesAndValues() throws IOException {
        String python = Fixtures.pythonWithNumpy();
        assumeTrue(python != null, "python3 with numpy not found");
        Path dir = Fixtures.tempDir("export-numpy");
        Path out = dir.resolve("q.safetensors");
        List<Quantized> rs = results();
        Export.write(out, rs);
        // Source: NumPy decodes the safetensors bytes by the rule documented in Export, with its own float64
        // arithmetic and float32 rounding; minifloat tables are checked against the OCP element encodings
        // (sign, exponent with bias 2^(e-1)-1, subnormals at exponent 0; E4M3 NaN at S.1111.111, E5M2 IEEE
        // specials) computed by formula in Python [from memory of the OCP FP8 and MX v1.0 specifications].
        String script = String.join("\n",
                "import json, struct, sys",
                "import numpy as np",
                "raw = open(sys.argv[1], 'rb').read()",
                "n = struct.unpack('<Q', raw[:8])[0]",
                "header = json.loads(raw[8:8 + n]); data = raw[8 + n:]",
                "meta = header.pop('__metadata__')",
                "DT = {'F32': '<f4', 'I8': 'i1', 'U8': 'u1', 'I16': '<i2', 'U16': '<u2'}",
                "def arr(name):",
                "    h = header[name]; b, e = h['data_offsets']",
                "    return np.frombuffer(data[b:e], DT[h['dtype']]).reshape(h['shape'])",
                "def spread(a, shape):",
                "    for ax in range(len(shape)):",
                "        a = np.repeat(a, shape[ax] // a.shape[ax], axis=ax)",
                "    return a",
                "def minifloat(e, m, kind):",
                "    out = []",
                "    bias = 2 ** (e - 1) - 1",
                "    for c in range(2 ** (1 + e + m)):",
                "        s = -1.0 if c >> (e + m) else 1.0",
                "        ex = (c >> m) & (2 ** e - 1); man = c & (2 ** m - 1)",
                "        if kind == 'e4m3' and ex == 15 and man == 7: out.append(np.nan); continue",
                "        if kind == 'e5m2' and ex == 31: out.append(s * np.inf if man == 0 else np.nan); continue",
                "        v = man / 2 ** m * 2.0 ** (1 - bias) if ex == 0 else (1 + man / 2 ** m) * 2.0 ** (ex - bias)",
                "        out.append(s * v)",
                "    return np.array(out)",
                "FORMATS = {'fp8-e4m3': (4, 3, 'e4m3'), 'fp8-e5m2': (5, 2, 'e5m2'), 'fp6-e3m2': (3, 2, ''),",
                "           'fp6-e2m3': (2, 3, ''), 'fp4-e2m1': (2, 1, '')}",
                "res = {}",
                "for key, rule in meta.items():",
                "    if not key.startswith('rungbook.decode.'): continue",
                "    name = key[len('rungbook.decode.'):]",
                "    codes = arr(name + '.codes').astype(np.int64)",
                "    scales = arr(name + '.scales')",
                "    seg = spread(np.arange(scales.size).reshape(scales.shape), codes.shape)",
                "    full = spread(scales.astype(np.float64), codes.shape)",
                "    zp = 0.0",
                "    if rule == 'affine':",
                "        level = codes.astype(np.float64)",
                "        if name + '.zero_points' in header:",
                "            zp = spread(arr(name + '.zero_points').astype(np.float64), codes.shape)",
                "    elif rule == 'half-step':",
                "        level = codes.astype(np.float64); zp = -0.5",
                "    elif rule == 'mxint8':",
                "        level = codes / 64.0",
                "    elif rule == 'fp16':",
                "        level = codes.astype(np.uint16).view(np.float16).astype(np.float64)",
                "    elif rule == 'bf16':",
                "        level = (codes.astype(np.uint32) << 16).view(np.float32).astype(np.float64)",
                "    elif rule == 'table':",
                "        L = arr(name + '.levels').astype(np.float64)",
                "        level = L[seg if L.shape[0] > 1 else 0, codes]",
                "        spec = meta.get('rungbook.spec.' + name, '').split(' ')[0]",
                "        fmt = spec[2:] if spec.startswith('mx') else spec",
                "        if fmt in FORMATS:",
                "            ref = minifloat(*FORMATS[fmt])",
                "            assert L.shape == (1, ref.size), (name, L.shape)",
                "            same = (L[0] == ref) | (np.isnan(L[0]) & np.isnan(ref))",
                "            assert same.all(), (name, np.nonzero(~same))",
                "            num = ~np.isnan(ref)",
                "            assert np.array_equal(np.signbit(L[0][num]), np.signbit(ref[num])), name",
                "    else:",
                "        raise SystemExit('unknown rule ' + rule)",
                "    deq = (full * (level - zp)).astype(np.float32)",
                "    res[name] = {'codes': codes.reshape(-1).tolist(),",
                "                 'scales': scales.astype(np.float32).reshape(-1).view(np.uint32).tolist(),",
                "                 'deq': deq.reshape(-1).view(np.uint32).tolist()}",
                "json.dump(res, open(sys.argv[2], 'w'))");
        Path result = dir.resolve("numpy.json");
        Fixtures.runPython(python, script, out.toString(), result.toString());
        JsonObject json = JsonParser.parseString(Files.readString(result)).getAsJsonObject();
        assertEquals(rs.size(), json.size());
        for (Quantized r : rs) {
            String name = r.source().name();
            JsonObject o = json.getAsJsonObject(name);
            String what = name + " " + r.spec().label();
            assertArrayEquals(r.codes().toIntArray(), ints(o, "codes"), what);
            assertArrayEquals(bits(r.scales()), ints(o, "scales"), what);
            assertArrayEquals(bits(r.dequantized()), ints(o, "deq"), what);
        }
    }

    private static int[] ints(JsonObject o, String key) {
        var a = o.getAsJsonArray(key);
        int[] out = new int[a.size()];
        for (int i = 0; i < out.length; i++) {
            out[i] = (int) a.get(i).getAsLong();
        }
        return out;
    }

    @Test
    void streamsACheckpointWithRulesAndCopiesTheRest() throws IOException {
        Path dir = Fixtures.tempDir("export-ckpt");
        Path in = dir.resolve("in.safetensors");
        Tensor w = weights();
        Map<String, Tensor> src = new LinkedHashMap<>();
        src.put("fc1.weight", w.withDType(DType.BF16));
        src.put("fc1.bias", Tensor.of(new float[] {0.5f, -1.25f, 3f}, 3).withDType(DType.BF16));
        src.put("fc2.weight", w);
        src.put("steps", Tensor.of(new float[] {7f}, 1).withDType(DType.I32));
        Checkpoint.write(in, src, Map.of("origin", "test"));
        Path out = dir.resolve("out.safetensors");
        Path deq = dir.resolve("deq.safetensors");
        List<String> seen = new ArrayList<>();
        try (Checkpoint c = Checkpoint.open(in)) {
            Export e = Export.of(c).spec("*.weight", Quantizer.parse("int4 per-group(1,16)"))
                    .spec("fc2.*", Quantizer.parse("nf4"));
            assertEquals(Quantizer.parse("nf4"), e.specFor("fc2.weight"));
            assertNull(e.specFor("fc1.bias"));
            e.write(out, dev.rungbook.progress.Progress.silent(), r -> seen.add(r.source().name()));
            e.dequantized().write(deq);
        }
        assertEquals(List.of("fc1.weight", "fc2.weight"), seen);
        Tensor fc1 = Checkpoint.open(in).tensor("fc1.weight");
        Quantized r1 = Quantizer.parse("int4 per-group(1,16)").apply(fc1);
        Quantized r2 = Quantizer.parse("nf4").apply(w.withName("fc2.weight"));
        try (QuantizedCheckpoint q = QuantizedCheckpoint.open(out)) {
            assertEquals(List.of("fc1.bias", "fc1.weight", "fc2.weight", "steps"), q.names());
            assertEquals("test", q.checkpoint().metadata().get("origin"));
            assertEquals("in.safetensors", q.checkpoint().metadata().get("rungbook.source"));
            assertEquals("BF16", q.checkpoint().metadata().get("rungbook.dtype.fc1.weight"));
            assertEquals(DType.BF16, q.dequantized("fc1.weight").dtype());
            assertArrayEquals(bits(r1.dequantized()), bits(q.dequantized("fc1.weight")));
            assertArrayEquals(bits(r2.dequantized()), bits(q.dequantized("fc2.weight")));
            assertFalse(q.isQuantized("fc1.bias"));
            assertEquals(DType.BF16, q.checkpoint().info("fc1.bias").dtype());
            assertArrayEquals(new float[] {0.5f, -1.25f, 3f}, q.dequantized("fc1.bias").toFloatArray());
            assertEquals(DType.I32, q.checkpoint().info("steps").dtype());
        }
        try (Checkpoint d = Checkpoint.open(deq)) {
            assertEquals(Export.DEQUANTIZED_FORMAT, d.metadata().get("rungbook.export"));
            assertEquals(DType.F32, d.info("fc1.weight").dtype());
            assertArrayEquals(bits(r1.dequantized()), bits(d.tensor("fc1.weight")));
            assertArrayEquals(bits(r2.dequantized()), bits(d.tensor("fc2.weight")));
            assertEquals("nf4 per-group(last,64)", d.metadata().get("rungbook.spec.fc2.weight"));
            assertEquals(DType.BF16, d.info("fc1.bias").dtype());
        }
    }

    @Test
    void refusesToOverwriteTheInputAndUnfitSpecs() throws IOException {
        Path dir = Fixtures.tempDir("export-refuse");
        Path in = dir.resolve("in.safetensors");
        Checkpoint.write(in, Map.of("w", weights(), "b", Tensor.of(new float[] {1, 2, 3}, 3)));
        byte[] before = Files.readAllBytes(in);
        Path link = dir.resolve("link.safetensors");
        Files.createSymbolicLink(link, in.getFileName());
        try (Checkpoint c = Checkpoint.open(in)) {
            Export e = Export.of(c).spec(Quantizer.linear(8));
            for (Path target : new Path[] {in, link, dir.resolve(".").resolve("in.safetensors")}) {
                IllegalArgumentException ex = assertThrows(IllegalArgumentException.class,
                        () -> e.keep("b").write(target));
                assertTrue(ex.getMessage().contains("refusing to overwrite the input"), ex.getMessage());
            }
            // per-group(1,16) does not fit the 1-D bias: refused before anything is written, naming both.
            Path out = dir.resolve("out.safetensors");
            IllegalArgumentException ex = assertThrows(IllegalArgumentException.class,
                    () -> Export.of(c).spec(Quantizer.parse("int4 per-group(1,16)")).write(out));
            assertTrue(ex.getMessage().contains("tensor 'b' [3]"), ex.getMessage());
            assertTrue(ex.getMessage().contains("axis 1 is out of range"), ex.getMessage());
            assertTrue(ex.getMessage().contains("int4 sym per-group(1,16)"), ex.getMessage());
            assertFalse(Files.exists(out));
            Export.of(c).spec(Quantizer.parse("int4 per-group(1,16)")).keepUnfit().write(out);
            try (QuantizedCheckpoint q = QuantizedCheckpoint.open(out)) {
                assertTrue(q.isQuantized("w"));
                assertFalse(q.isQuantized("b"));
            }
        }
        assertArrayEquals(before, Files.readAllBytes(in));
        try (Stream<Path> s = Files.list(dir)) {
            assertTrue(s.noneMatch(p -> p.getFileName().toString().endsWith(".tmp")), "temporary file left");
        }
    }

    @Test
    void refusesClashingNamesAndNamelessResults() throws IOException {
        Path dir = Fixtures.tempDir("export-clash");
        Path in = dir.resolve("in.safetensors");
        Checkpoint.write(in, Map.of("w", weights(), "w.codes", Tensor.of(new float[] {1}, 1)));
        try (Checkpoint c = Checkpoint.open(in)) {
            IllegalArgumentException ex = assertThrows(IllegalArgumentException.class,
                    () -> Export.of(c).spec("w", Quantizer.linear(8)).write(dir.resolve("o.safetensors")));
            assertTrue(ex.getMessage().contains("'w.codes' would be written for both"), ex.getMessage());
        }
        Quantized nameless = Quantizer.linear(8).apply(weights());
        IllegalArgumentException ex = assertThrows(IllegalArgumentException.class,
                () -> Export.write(dir.resolve("n.safetensors"), List.of(nameless)));
        assertTrue(ex.getMessage().contains("without a name"), ex.getMessage());
    }

    @Test
    void codeZeroStandsForPositiveZeroOnEveryPath() {
        // A value that rounds to code 0 dequantizes to +0.0 whether the spec runs through the fused row kernel
        // (per-channel min-max) or the general path (per-group, MXINT8): the code alone decides the value, which is
        // what lets an export reproduce it. Source: IEEE 754, rint(-0.3) = -0.0 while the integer code is 0.
        float[] v = new float[64];
        v[0] = -0.005f;
        v[1] = 1f;
        v[2] = -1f;
        Tensor t = Tensor.of(v, 2, 32);
        for (String s : new String[] {"int4 per-channel(0)", "int4 per-group(1,16)", "int4 per-group(1,16) ceil",
            "mxint8"}) {
            Quantized r = Quantizer.parse(s).apply(t);
            assertEquals(0, r.codes().get(0), s);
            assertEquals(0, Float.floatToRawIntBits(r.dequantized().getFlat(0)), s + ": -0.0 instead of +0.0");
        }
    }

    @Test
    void malformedExportsAreRefusedNamingTheTensor() throws IOException {
        Path dir = Fixtures.tempDir("export-bad");
        java.util.function.BiFunction<String, Map<String, Tensor>, Path> file = (decode, parts) -> {
            Path f = dir.resolve(decode + parts.size() + ".safetensors");
            Checkpoint.write(f, parts, Map.of("rungbook.decode.w", decode));
            return f;
        };
        Tensor codes = Tensor.of(new float[] {0, 1, 2, 3}, 2, 2).withDType(DType.U8);
        Map<String, Tensor> noScales = Map.of("w.codes", codes);
        Map<String, Tensor> wrongRank = Map.of("w.codes", codes, "w.scales", Tensor.of(new float[] {1, 1}, 2));
        Map<String, Tensor> badTable = Map.of("w.codes", codes, "w.scales", Tensor.of(new float[] {1, 1}, 2, 1),
                "w.levels", Tensor.of(new float[] {0, 1, 2}, 1, 3));
        Map<String, Tensor> noTable = Map.of("w.codes", codes, "w.scales", Tensor.of(new float[] {1, 1}, 2, 1));
        String[][] cases = {{"affine", "0", "part 'w.scales' is missing"}, {"affine", "1", "scales of rank 1"},
            {"table", "2", "code 3 at index 3 is outside the 3-entry level table"},
            {"table", "3", "decode 'table' without a levels tensor"}, {"cubic", "3", "unknown decode rule 'cubic'"}};
        List<Map<String, Tensor>> parts = List.of(noScales, wrongRank, badTable, noTable);
        for (String[] c : cases) {
            Path f = file.apply(c[0], parts.get(Integer.parseInt(c[1])));
            try (QuantizedCheckpoint q = QuantizedCheckpoint.open(f)) {
                assertTrue(q.isQuantized("w"));
                dev.rungbook.io.CheckpointFormatException e = assertThrows(
                        dev.rungbook.io.CheckpointFormatException.class, () -> q.dequantized("w"), c[2]);
                assertTrue(e.getMessage().contains("'w'") && e.getMessage().contains(c[2]), e.getMessage());
            }
        }
        // A plain checkpoint opens with every tensor unquantized.
        try (QuantizedCheckpoint q = QuantizedCheckpoint.open(file.apply("plain", Map.of("x", codes)))) {
            assertFalse(q.isQuantized("x"));
            assertEquals(List.of("x"), q.names());
            assertThrows(IllegalArgumentException.class, () -> q.codes("x"));
        }
    }

    @Test
    void shapeProblemsAreNamedBeforeAnyWork() {
        Quantizer g = Quantizer.parse("int4 per-group(1,16)");
        assertEquals(Optional.of("axis 1 is out of range for shape [3]"), g.shapeProblem(3));
        assertEquals(Optional.of("group size 16 does not divide dimension 1 of shape [4, 24]"), g.shapeProblem(4, 24));
        assertEquals(Optional.empty(), g.shapeProblem(4, 32));
        assertEquals(Optional.empty(), Quantizer.parse("int8 per-tensor").shapeProblem());
    }

    @Test
    void globsMatchWholeNames() {
        assertTrue(Export.glob("*.weight").matcher("layers.0.attn.weight").matches());
        assertFalse(Export.glob("*.weight").matcher("layers.0.weight.scale").matches());
        assertTrue(Export.glob("fc?.bias").matcher("fc1.bias").matches());
        assertFalse(Export.glob("fc?.bias").matcher("fc10.bias").matches());
        assertTrue(Export.glob("a+b(c)").matcher("a+b(c)").matches());
    }
}
