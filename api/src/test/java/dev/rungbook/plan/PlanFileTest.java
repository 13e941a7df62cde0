package dev.rungbook.plan;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import java.io.IOException;
import java.io.UncheckedIOException;
import java.nio.charset.StandardCharsets;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.List;
import java.util.Map;
import org.junit.jupiter.api.Test;
import org.junit.jupiter.api.io.TempDir;

class PlanFileTest {
    private static final Path F = Path.of("p.json");

    private static PlanFormatException refused(String json) {
        return assertThrows(PlanFormatException.class,
                () -> PlanFile.parse(json.getBytes(StandardCharsets.UTF_8), F), json);
    }

    private static void refused(String json, String field, String... words) {
        PlanFormatException e = refused(json);
        assertEquals(F, e.file());
        assertEquals(field, e.field(), e.getMessage());
        assertTrue(e.getMessage().startsWith("p.json"), e.getMessage());
        for (String w : words) {
            assertTrue(e.getMessage().contains(w), "'" + w + "' not in: " + e.getMessage());
        }
    }

    @Test
    void writesTheDocumentedLayoutAndReadsItBack(@TempDir Path dir) throws IOException {
        PlanFile.Contents c = new PlanFile.Contents(List.of(new PlanFile.Entry("fc1", "int4 sym per-channel(0)"),
                new PlanFile.Entry("fc2", "int8 sym per-channel(0)")), Map.of("budget_bytes", "40960"));
        Path f = dir.resolve("plan.json");
        PlanFile.write(f, c);
        // Source: the format documented on PlanFile (written out by hand here).
        String expected = "{\n"
                + "  \"rungbook_plan\": 1,\n"
                + "  \"layers\": [\n"
                + "    {\n      \"layer\": \"fc1\",\n      \"spec\": \"int4 sym per-channel(0)\"\n    },\n"
                + "    {\n      \"layer\": \"fc2\",\n      \"spec\": \"int8 sym per-channel(0)\"\n    }\n"
                + "  ],\n"
                + "  \"info\": {\n    \"budget_bytes\": \"40960\"\n  }\n"
                + "}\n";
        assertEquals(expected, Files.readString(f));
        assertEquals(c, PlanFile.read(f));
        // Compact, reordered fields and no info read the same.
        PlanFile.Contents d = PlanFile.parse(("{\"layers\":[{\"spec\":\"int8\",\"layer\":\"a\"}],"
                + "\"rungbook_plan\":1}").getBytes(StandardCharsets.UTF_8), F);
        assertEquals(List.of(new PlanFile.Entry("a", "int8")), d.layers());
        assertEquals(Map.of(), d.info());
        // An atomic rewrite leaves no temporary file behind.
        PlanFile.write(f, d);
        try (var s = Files.list(dir)) {
            assertEquals(List.of(f), s.toList());
        }
    }

    @Test
    void refusesMalformedFilesNamingTheField() {
        refused("", null, "empty file");
        refused("[1]", null, "expected a JSON object", "found an array");
        refused("{\"rungbook_plan\": 1, \"layers\": [] ", null, "malformed JSON");
        refused("{\"rungbook_plan\": 1, \"layers\": []} x", null, "malformed JSON", "not strict JSON",
                "line 1 column 37");
        refused("{\"rungbook_plan\": 1, \"layers\": [], }", null, "malformed JSON");
        refused("{\"layers\": []}", "rungbook_plan", "missing");
        refused("{\"rungbook_plan\": 1}", "layers", "missing");
        refused("{\"rungbook_plan\": 2, \"layers\": []}", "rungbook_plan", "version 2 is not supported");
        refused("{\"rungbook_plan\": \"1\", \"layers\": []}", "rungbook_plan", "expected the integer 1",
                "found a string");
        refused("{\"rungbook_plan\": 1, \"rungbook_plan\": 1, \"layers\": []}", "rungbook_plan", "twice");
        refused("{\"rungbook_plan\": 1, \"layers\": [], \"budget\": 3}", "budget", "unknown field");
        refused("{\"rungbook_plan\": 1, \"layers\": {}}", "layers", "expected an array");
        refused("{\"rungbook_plan\": 1, \"layers\": [[[[[[[[]]]]]]]]}", "layers[0]", "expected an object");
        refused("{\"rungbook_plan\": 1, \"layers\": [{\"layer\": \"fc1\"}]}", "layers[0].spec", "missing",
                "'fc1'");
        refused("{\"rungbook_plan\": 1, \"layers\": [{\"spec\": \"int8\"}]}", "layers[0].layer", "missing");
        refused("{\"rungbook_plan\": 1, \"layers\": [{\"layer\": \"a\", \"spec\": 8}]}", "layers[0].spec",
                "expected a string", "found a number", "line 1");
        refused("{\"rungbook_plan\": 1, \"layers\": [{\"layer\": \" \", \"spec\": \"int8\"}]}", "layers[0].layer",
                "non-blank");
        refused("{\"rungbook_plan\": 1, \"layers\": [{\"layer\": \"a\", \"spec\": \"int8\", \"bits\": 8}]}",
                "layers[0].bits", "unknown field");
        refused("{\"rungbook_plan\": 1, \"layers\": [{\"layer\": \"a\", \"spec\": \"int8\"}, "
                + "{\"layer\": \"a\", \"spec\": \"int4\"}]}", "layers[1].layer", "planned twice");
        refused("{\"rungbook_plan\": 1, \"layers\": [], \"info\": {\"k\": 1}}", "info.k", "expected a string");
        refused("{\"rungbook_plan\": 1, \"layers\": [], \"info\": {\"k\": \"a\\ud800\"}}", "info.k",
                "unpaired surrogate \\ud800 at character 1");
        PlanFormatException e = assertThrows(PlanFormatException.class,
                () -> PlanFile.parse(new byte[] {'{', (byte) 0xC3, '}'}, F));
        assertTrue(e.getMessage().contains("not valid UTF-8"), e.getMessage());
    }

    @Test
    void aMissingFileIsAnIoErrorNamingIt(@TempDir Path dir) {
        UncheckedIOException e = assertThrows(UncheckedIOException.class,
                () -> PlanFile.read(dir.resolve("none.json")));
        assertTrue(e.getMessage().contains("none.json"), e.getMessage());
    }
}
