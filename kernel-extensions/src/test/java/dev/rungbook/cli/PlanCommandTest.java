package dev.rungbook.cli;

import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.io.Checkpoint;
import dev.rungbook.plan.Plan;
import dev.rungbook.quant.Quantized;
import dev.rungbook.quant.QuantizedCheckpoint;
import dev.rungbook.tensor.Tensor;
import java.io.PrintWriter;
import java.io.StringWriter;
import java.nio.charset.StandardCharsets;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.List;
import java.util.Map;
import org.junit.jupiter.api.Test;
import org.junit.jupiter.api.io.TempDir;
import picocli.CommandLine;

class PlanCommandTest {
    private static final String MLP = "../sample-tensors/conveyor-mlp.f32.safetensors";
    private static final String VALIDATION = "../sample-tensors/conveyor-validation.npz";

    /** Exit code, standard output and standard error of one run. */
    private record Run(int code, String out, String err) {
    }

    private static Run run(String... args) {
        StringWriter out = new StringWriter();
        StringWriter err = new StringWriter();
        CommandLine cl = new CommandLine(new Main());
        cl.setOut(new PrintWriter(out, true));
        cl.setErr(new PrintWriter(err, true));
        int code = cl.execute(args);
        return new Run(code, out.toString(), err.toString());
    }

    private static long plannedBytes(Plan p) {
        try (Checkpoint c = Checkpoint.open(Path.of(MLP))) {
            long sum = 0;
            for (Quantized q : p.quantize(c.tensors()).values()) {
                sum += q.bytes();
            }
            return sum;
        }
    }

    @Test
    void writesAPlanThatFitsTheBudgetAndCharts(@TempDir Path dir) {
        Path out = dir.resolve("plan.json");
        Path charts = dir.resolve("charts");
        Run r = run("plan", MLP, "--budget", "40KiB", "--data", VALIDATION, "--out", out.toString(),
                "--charts", charts.toString());
        assertEquals(0, r.code(), r.err());
        Plan p = Plan.read(out);
        assertEquals(List.of("fc1", "fc2", "fc3"), p.layers());
        // The plan's weights, quantized independently of the command, fit 40 KiB = 40960 bytes.
        long bytes = plannedBytes(p);
        assertTrue(bytes <= 40_960, bytes + " bytes");
        assertEquals(Long.toString(bytes), p.info().get("bytes"));
        assertEquals("40960", p.info().get("budget_bytes"));
        assertTrue(r.out().contains("accuracy: predicted") && r.out().contains("all int8"), r.out());
        assertTrue(Files.isRegularFile(charts.resolve("sensitivity.png")));
        assertTrue(Files.isRegularFile(charts.resolve("pareto.png")));
    }

    @Test
    void quantizeAppliesAWrittenPlanToTheCheckpoint(@TempDir Path dir) {
        Path planFile = dir.resolve("plan.json");
        Run r = run("plan", MLP, "--budget", "40KiB", "--data", VALIDATION, "--candidates", "int8", "int4", "int3",
                "--out", planFile.toString());
        assertEquals(0, r.code(), r.err());
        Plan p = Plan.read(planFile);
        Path out = dir.resolve("planned.safetensors");
        Run q = run("quantize", MLP, "--plan", planFile.toString(), "--out", out.toString());
        assertEquals(0, q.code(), q.err());
        assertTrue(q.out().contains("3 of 6 tensors quantized with the plan plan.json (3 layers)"), q.out());
        // Each planned weight in the export decodes to what the plan's own spec makes of the input tensor.
        Map<String, Quantized> expected;
        try (Checkpoint c = Checkpoint.open(Path.of(MLP))) {
            expected = p.quantize(c.tensors());
        }
        try (QuantizedCheckpoint back = QuantizedCheckpoint.open(out)) {
            for (Map.Entry<String, Quantized> e : expected.entrySet()) {
                assertArrayEquals(e.getValue().dequantized().toFloatArray(),
                        back.dequantized(e.getKey()).toFloatArray(), e.getKey());
            }
        }
        Run both = run("quantize", MLP, "--plan", planFile.toString(), "--spec", "int8", "--out", out.toString());
        assertEquals(2, both.code());
        assertTrue(both.err().contains("exactly one of --spec SPEC and --plan PLAN.json"), both.err());
        Run other = run("quantize", "../sample-tensors/thermal-cnn.f32.safetensors", "--plan", planFile.toString(),
                "--out", dir.resolve("x.safetensors").toString());
        assertEquals(1, other.code());
        assertTrue(other.err().contains("plans layer 'fc1'") && other.err().contains("no tensor 'fc1.weight'"),
                other.err());
    }

    @Test
    void withoutOutThePlanGoesToStandardOutput() {
        Run r = run("plan", MLP, "--budget", "30000", "--data", VALIDATION, "--candidates", "int8", "q4=int4",
                "--objective", "accuracy", "--rerank", "0");
        assertEquals(0, r.code(), r.err());
        Plan p = Plan.parse(r.out().getBytes(StandardCharsets.UTF_8), Path.of("stdout"));
        assertTrue(plannedBytes(p) <= 30_000);
        assertTrue(r.err().contains("uniform baselines:"), r.err());
        assertTrue(r.err().contains("all q4"), r.err());
    }

    @Test
    void calibrationInputsWithoutLabelsAreEnough(@TempDir Path dir) {
        Path data = dir.resolve("inputs.npz");
        try (Checkpoint c = Checkpoint.open(Path.of(VALIDATION))) {
            Tensor x = c.tensor("inputs");
            Checkpoint.write(data, Map.of("inputs", Tensor.of(x.toFloatArray(), x.shape())));
        }
        Path out = dir.resolve("p.json");
        Run r = run("plan", MLP, "--budget", "45000", "--data", data.toString(), "--out", out.toString());
        assertEquals(0, r.code(), r.err());
        assertTrue(r.out().contains("no labels"), r.out());
        assertTrue(plannedBytes(Plan.read(out)) <= 45_000);
        Run acc = run("plan", MLP, "--budget", "45000", "--data", data.toString(), "--objective", "accuracy");
        assertEquals(1, acc.code());
        assertTrue(acc.err().contains("needs labelled data"), acc.err());
    }

    @Test
    void usageErrorsExitWithTwoAndNameTheProblem(@TempDir Path dir) {
        Run noBudget = run("plan", MLP, "--data", VALIDATION);
        assertEquals(2, noBudget.code());
        assertTrue(noBudget.err().contains("--budget"), noBudget.err());
        Run badBudget = run("plan", MLP, "--budget", "40XB", "--data", VALIDATION);
        assertEquals(2, badBudget.code());
        assertTrue(badBudget.err().contains("unknown unit 'XB'"), badBudget.err());
        Run badSpec = run("plan", MLP, "--budget", "40KiB", "--data", VALIDATION, "--candidates", "int8",
                "int4 per-grop(1,32)");
        assertEquals(2, badSpec.code());
        assertTrue(badSpec.err().contains("per-grop"), badSpec.err());
        Run badObjective = run("plan", MLP, "--budget", "40KiB", "--data", VALIDATION, "--objective", "speed");
        assertEquals(2, badObjective.code());
        assertTrue(badObjective.err().contains("unknown objective 'speed'"), badObjective.err());
        Run overwrite = run("plan", MLP, "--budget", "40KiB", "--data", VALIDATION, "--out", MLP);
        assertEquals(2, overwrite.code());
        assertTrue(overwrite.err().contains("refusing to overwrite"), overwrite.err());
    }

    @Test
    void failuresExitWithOneAndNameTheFile(@TempDir Path dir) {
        Run missing = run("plan", dir.resolve("none.safetensors").toString(), "--budget", "40KiB", "--data",
                VALIDATION);
        assertEquals(1, missing.code());
        assertTrue(missing.err().contains("none.safetensors"), missing.err());
        Run tiny = run("plan", MLP, "--budget", "1KiB", "--data", VALIDATION);
        assertEquals(1, tiny.code());
        assertTrue(tiny.err().contains("below the smallest plan"), tiny.err());
        Run wrongData = run("plan", MLP, "--budget", "40KiB", "--data", MLP);
        assertEquals(1, wrongData.code());
        assertTrue(wrongData.err().contains("conveyor-mlp.f32.safetensors: no tensor 'inputs'"), wrongData.err());
        Path narrow = dir.resolve("narrow.npz");
        Checkpoint.write(narrow, Map.of("inputs", Tensor.of(new float[6], 2, 3)));
        Run shape = run("plan", MLP, "--budget", "40KiB", "--data", narrow.toString());
        assertEquals(1, shape.code());
        assertTrue(shape.err().contains("narrow.npz: ") && shape.err().contains("fc1"), shape.err());
        Run layers = run("plan", MLP, "--budget", "40KiB", "--data", VALIDATION, "--layers", "fc1,fc9");
        assertEquals(1, layers.code());
        assertTrue(layers.err().contains("'fc9.weight'"), layers.err());
    }

    @Test
    void readsAConvNetFromItsArchitectureMetadataOrFromNetwork(@TempDir Path dir) {
        String cnn = "../sample-tensors/thermal-cnn.f32.safetensors";
        Path out = dir.resolve("cnn-plan.json");
        // f32 weights: conv1 72 + conv2 1152 + fc 1024 values = 8,992 bytes; 2 KiB needs about 4 bits a weight.
        Run r = run("plan", cnn, "--budget", "2KiB", "--data", "../sample-tensors/thermal-validation.npz",
                "--candidates", "int8", "int4", "int2", "--out", out.toString());
        assertEquals(0, r.code(), r.err());
        Plan p = Plan.read(out);
        assertEquals(List.of("conv1", "conv2", "fc"), p.layers());
        assertTrue(Long.parseLong(p.info().get("bytes")) <= 2048, p.info().toString());
        assertTrue(r.out().contains("accuracy: predicted"), r.out());
        Run bad = run("plan", cnn, "--budget", "2KiB", "--data", "../sample-tensors/thermal-validation.npz",
                "--network", "conv1 padding 1 -> bn1 -> relu -> maxpool 2/2 -> conv9");
        assertEquals(1, bad.code());
        assertTrue(bad.err().contains("thermal-cnn.f32.safetensors: architecture step 5 'conv9'")
                && bad.err().contains("no tensor 'conv9.weight'"), bad.err());
    }

    @Test
    void helpDescribesTheCommand() {
        Run r = run("plan", "--help");
        assertEquals(0, r.code());
        assertTrue(r.out().contains("multilayer perceptron") && r.out().contains("--budget")
                && r.out().contains("Exit codes"), r.out());
    }
}
