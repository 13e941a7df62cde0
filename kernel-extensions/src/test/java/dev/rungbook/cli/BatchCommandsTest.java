package dev.rungbook.cli;

import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertFalse;
import static org.junit.jupiter.api.Assertions.assertTrue;

import com.google.gson.JsonArray;
import com.google.gson.JsonObject;
import com.google.gson.JsonParser;
import dev.rungbook.io.Checkpoint;
import dev.rungbook.quant.Quantized;
import dev.rungbook.quant.QuantizedCheckpoint;
import dev.rungbook.quant.Quantizer;
import dev.rungbook.study.Study;
import dev.rungbook.tensor.DType;
import dev.rungbook.tensor.Tensor;
import dev.rungbook.testing.Fixtures;
import java.io.IOException;
import java.io.PrintWriter;
import java.io.StringWriter;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.LinkedHashMap;
import java.util.List;
import java.util.Map;
import org.apache.commons.math3.stat.descriptive.DescriptiveStatistics;
import org.junit.jupiter.api.BeforeAll;
import org.junit.jupiter.api.Test;
import picocli.CommandLine;
import tech.tablesaw.api.Table;

/** The batch commands run in-process through picocli: exit codes, messages and the files they write. */
class BatchCommandsTest {
    private static Path dir;
    private static Path ckpt;
    private static float[] weight;

    /** Exit code and what the command printed. */
    record Run(int code, String out, String err) {
    }

    static Run run(String... args) {
        StringWriter out = new StringWriter();
        StringWriter err = new StringWriter();
        CommandLine cl = Main.commandLine();
        cl.setOut(new PrintWriter(out, true));
        cl.setErr(new PrintWriter(err, true));
        int code = cl.execute(args);
        return new Run(code, out.toString(), err.toString());
    }

    @BeforeAll
    static void checkpoint() throws IOException {
        dir = Fixtures.tempDir("cli");
        ckpt = dir.resolve("model.safetensors");
        weight = Fixtures.gaussian(7, 8 * 64);
        Map<String, Tensor> t = new LinkedHashMap<>();
        t.put("fc1.weight", Tensor.of(weight, 8, 64).withDType(DType.BF16));
        t.put("fc1.bias", Tensor.of(new float[] {0.5f, -0.25f, 1f, 2f, -3f, 0f, 0.125f, 4f}, 8));
        t.put("fc2.weight", Tensor.of(Fixtures.gaussian(8, 4 * 8), 4, 8));
        Checkpoint.write(ckpt, t, Map.of("origin", "cli test"));
    }

    private static String path(String name) {
        return dir.resolve(name).toString();
    }

    @Test
    void everyCommandHasHelp() {
        for (String c : new String[] {"inspect", "quantize", "study"}) {
            Run r = run(c, "--help");
            assertEquals(0, r.code(), c);
            assertTrue(r.out().contains("Usage: rungbook " + c), r.out());
        }
        assertTrue(run("--help").out().contains("quantize"));
    }

    @Test
    void inspectListsTensorsWithStatistics() {
        Run r = run("inspect", ckpt.toString());
        assertEquals(0, r.code(), r.err());
        assertTrue(r.out().matches("(?s).*\\nfc1\\.weight +BF16 +\\[8,64\\] +512 .*"), r.out());
        assertTrue(r.out().contains("origin = cli test"), r.out());
        Run j = run("inspect", ckpt.toString(), "--json");
        assertEquals(0, j.code(), j.err());
        JsonObject root = JsonParser.parseString(j.out()).getAsJsonObject();
        JsonArray ts = root.getAsJsonArray("tensors");
        assertEquals(3, ts.size());
        JsonObject w = ts.get(1).getAsJsonObject(); // tensors in file order: fc1.bias, fc1.weight, fc2.weight
        assertEquals("fc1.weight", w.get("name").getAsString());
        assertEquals(512, w.get("elements").getAsLong());
        // Source: commons-math3 DescriptiveStatistics over the bf16-rounded values the file holds.
        float[] stored = Checkpoint.open(ckpt).tensor("fc1.weight").toFloatArray();
        DescriptiveStatistics d = new DescriptiveStatistics();
        for (float v : stored) {
            d.addValue(v);
        }
        JsonObject st = w.getAsJsonObject("stats");
        assertEquals(d.getMin(), st.get("min").getAsDouble(), 0);
        assertEquals(d.getMax(), st.get("max").getAsDouble(), 0);
        assertEquals(d.getMean(), st.get("mean").getAsDouble(), 1e-12);
        assertEquals(d.getStandardDeviation(), st.get("std").getAsDouble(), 1e-9);
        assertEquals(d.getKurtosis(), st.get("excess_kurtosis").getAsDouble(), 1e-9);
        Run n = run("inspect", ckpt.toString(), "--no-stats", "--json");
        assertTrue(JsonParser.parseString(n.out()).getAsJsonObject().getAsJsonArray("tensors").get(0)
                .getAsJsonObject().get("stats").isJsonNull());
        Run missing = run("inspect", path("nope.safetensors"));
        assertEquals(1, missing.code());
        assertTrue(missing.err().contains("rungbook inspect:") && missing.err().contains("nope.safetensors"),
                missing.err());
        assertEquals(2, run("inspect").code());
    }

    @Test
    void quantizeWritesTheExportAndReports() throws IOException {
        String out = path("q.safetensors");
        Run r = run("quantize", ckpt.toString(), "--spec", "int4 per-group(1,8)", "--tensors", "*.weight", "--out",
                out, "--report", path("q.html"));
        assertEquals(0, r.code(), r.err());
        assertTrue(r.out().contains("2 of 3 tensors quantized with 'int4 sym per-group(1,8)'"), r.out());
        Tensor w = Checkpoint.open(ckpt).tensor("fc1.weight");
        Quantized expected = Quantizer.parse("int4 per-group(1,8)").apply(w);
        try (QuantizedCheckpoint q = QuantizedCheckpoint.open(Path.of(out))) {
            assertTrue(q.isQuantized("fc1.weight"));
            assertFalse(q.isQuantized("fc1.bias"));
            assertArrayEquals(expected.dequantized().toFloatArray(), q.dequantized("fc1.weight").toFloatArray());
            assertEquals("int4 sym per-group(1,8)",
                    q.checkpoint().metadata().get("rungbook.spec.fc1.weight"));
        }
        String html = Files.readString(dir.resolve("q.html"));
        assertTrue(html.contains("<img") && html.contains("data:image/png;base64,"), "chart embedded");
        assertTrue(html.contains("fc2.weight") && html.contains("sqnr_db"), "table");
        assertFalse(html.contains("<td>fc1.bias</td>"), "copied tensors are not in the error table");
        // JSON and CSV reports: one row per quantized tensor, the SQNR the library reports.
        assertEquals(0, run("quantize", ckpt.toString(), "--spec", "int8", "--out", path("q8.safetensors"),
                "--report", path("q8.json")).code());
        JsonObject json = JsonParser.parseString(Files.readString(dir.resolve("q8.json"))).getAsJsonObject();
        JsonArray rows = json.getAsJsonArray("rows");
        assertEquals(3, rows.size());
        JsonObject first = rows.get(1).getAsJsonObject();
        assertEquals("fc1.weight", first.get("tensor").getAsString());
        assertEquals(Quantizer.linear(8).apply(w).error().sqnrDb(), first.get("sqnr_db").getAsDouble(), 0);
        assertEquals(0, run("quantize", ckpt.toString(), "--spec", "nf4 block(8)", "--out", path("n.safetensors"),
                "--report", path("n.csv"), "--dequantized").code());
        List<String> csv = Files.readAllLines(dir.resolve("n.csv"));
        assertEquals(4, csv.size());
        assertTrue(csv.get(0).startsWith("tensor,shape,spec,elements,bits_per_weight,bytes,mse"), csv.get(0));
        assertTrue(csv.get(2).startsWith("fc1.weight,\"[8,64]\",\"nf4 per-group(last,8)\",512,"), csv.get(2));
        try (Checkpoint d = Checkpoint.open(dir.resolve("n.safetensors"))) {
            assertEquals(DType.F32, d.info("fc1.weight").dtype());
            assertArrayEquals(Quantizer.parse("nf4 block(8)").apply(w).dequantized().toFloatArray(),
                    d.tensor("fc1.weight").toFloatArray());
        }
    }

    @Test
    void quantizeRefusesBadSpecsUnfitTensorsAndTheInput() throws IOException {
        Run bad = run("quantize", ckpt.toString(), "--spec", "int4 per-grup(1,128)", "--out", path("x.safetensors"));
        assertEquals(2, bad.code());
        assertTrue(bad.err().contains("'per-grup(1,128)' at column 6"), bad.err());
        assertTrue(bad.err().contains("Try 'rungbook quantize --help'"), bad.err());
        Run same = run("quantize", ckpt.toString(), "--spec", "int8", "--out", ckpt.toString());
        assertEquals(1, same.code());
        assertTrue(same.err().contains("refusing to overwrite"), same.err());
        Run unfit = run("quantize", ckpt.toString(), "--spec", "int4 per-group(1,16)", "--out", path("u.safetensors"));
        assertEquals(1, unfit.code());
        assertTrue(unfit.err().contains("tensor 'fc1.bias'") && unfit.err().contains("axis 1 is out of range"),
                unfit.err());
        assertFalse(Files.exists(dir.resolve("u.safetensors")));
        assertEquals(0, run("quantize", ckpt.toString(), "--spec", "int4 per-group(1,8)", "--keep-unfit", "--out",
                path("u.safetensors")).code());
        Run none = run("quantize", ckpt.toString(), "--spec", "int8", "--tensors", "conv*", "--out",
                path("v.safetensors"));
        assertEquals(1, none.code());
        assertTrue(none.err().contains("no tensor matches --tensors [conv*]"), none.err());
        assertEquals(2, run("quantize", ckpt.toString(), "--spec", "int8", "--out", path("v.npz")).code());
        assertEquals(2, run("quantize", ckpt.toString(), "--spec", "int8", "--out", path("v.safetensors"),
                "--report", path("v.txt")).code());
        assertEquals(2, run("quantize", ckpt.toString(), "--out", path("v.safetensors")).code());
    }

    @Test
    void studyComparesSpecsAndWritesReports() throws IOException {
        Run r = run("study", ckpt.toString(), "--spec", "int8", "--spec", "int4 per-group(1,8)", "--spec", "nf4 block(8)",
                "--tensors", "*.weight", "--report", path("s.html"));
        assertEquals(0, r.code(), r.err());
        assertTrue(r.out().contains("2 tensors x 3 specs"), r.out());
        String html = Files.readString(dir.resolve("s.html"));
        assertEquals(2, html.split("data:image/png;base64,", -1).length - 1, "two charts embedded");
        assertTrue(html.contains("nf4 per-group(last,8)"), "spec in tables");
        assertEquals(0, run("study", ckpt.toString(), "--spec", "int8", "--spec", "int4 per-group(1,8)",
                "--tensors", "*.weight", "--report", path("s.json")).code());
        JsonObject json = JsonParser.parseString(Files.readString(dir.resolve("s.json"))).getAsJsonObject();
        assertEquals(4, json.getAsJsonArray("rows").size());
        assertEquals(2, json.getAsJsonArray("summary").size());
        // The rows equal the library's own study of the same tensors.
        try (Checkpoint c = Checkpoint.open(ckpt)) {
            Table t = Study.of(c).filter(n -> n.endsWith(".weight"))
                    .compare(Quantizer.linear(8), Quantizer.parse("int4 per-group(1,8)")).table();
            for (int i = 0; i < 4; i++) {
                JsonObject row = json.getAsJsonArray("rows").get(i).getAsJsonObject();
                assertEquals(t.stringColumn("tensor").get(i), row.get("tensor").getAsString());
                assertEquals(t.doubleColumn("sqnr_db").get(i), row.get("sqnr_db").getAsDouble(), 0);
            }
        }
        assertEquals(0, run("study", ckpt.toString(), "--spec", "int8", "--report", path("s.csv")).code());
        assertEquals(4, Files.readAllLines(dir.resolve("s.csv")).size());
        Run bad = run("study", ckpt.toString(), "--spec", "int8", "--spec", "nf4 blok(8)");
        assertEquals(2, bad.code());
        assertTrue(bad.err().contains("'blok(8)' at column 5"), bad.err());
        assertEquals(2, run("study", ckpt.toString(), "--spec", "int8", "--spec", "int8 sym").code());
        Run unfit = run("study", ckpt.toString(), "--spec", "int8", "--spec", "int4 per-group(1,8)");
        assertEquals(1, unfit.code());
        assertTrue(unfit.err().contains("tensor 'fc1.bias' [8]: axis 1 is out of range"), unfit.err());
        assertTrue(unfit.err().contains("--skip-unfit"), unfit.err());
        Run skip = run("study", ckpt.toString(), "--spec", "int8", "--spec", "int4 per-group(1,8)", "--skip-unfit",
                "--report", path("k.csv"));
        assertEquals(0, skip.code(), skip.err());
        assertTrue(skip.out().contains("2 tensors x 2 specs (skipped, as some spec does not fit them: fc1.bias)"),
                skip.out());
        assertEquals(5, Files.readAllLines(dir.resolve("k.csv")).size());
        assertEquals(2, run("study", ckpt.toString()).code());
    }
}
