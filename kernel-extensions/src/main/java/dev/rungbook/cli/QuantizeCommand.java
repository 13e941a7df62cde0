package dev.rungbook.cli;

import dev.rungbook.io.Checkpoint;
import dev.rungbook.metrics.ErrorReport;
import dev.rungbook.plan.Plan;
import dev.rungbook.quant.Export;
import dev.rungbook.quant.Quantized;
import dev.rungbook.quant.Quantizer;
import dev.rungbook.quant.SpecText;
import dev.rungbook.study.StudyResult;
import java.io.PrintWriter;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.ArrayList;
import java.util.LinkedHashMap;
import java.util.List;
import java.util.Locale;
import java.util.Map;
import java.util.concurrent.Callable;
import org.knowm.xchart.internal.chartpart.IChart;
import picocli.CommandLine.Command;
import picocli.CommandLine.Mixin;
import picocli.CommandLine.Model.CommandSpec;
import picocli.CommandLine.Option;
import picocli.CommandLine.ParameterException;
import picocli.CommandLine.Parameters;
import picocli.CommandLine.Spec;
import tech.tablesaw.api.DoubleColumn;
import tech.tablesaw.api.IntColumn;
import tech.tablesaw.api.LongColumn;
import tech.tablesaw.api.StringColumn;
import tech.tablesaw.api.Table;

/** {@code rungbook quantize FILE --spec SPEC --out OUT}: applies a spec to matching tensors and exports the result. */
@Command(name = "quantize", mixinStandardHelpOptions = true,
        description = {"Quantize the tensors of a checkpoint with one spec and write a quantized safetensors export "
            + "(codes, scales, zero points, level tables, and the spec text of each tensor in __metadata__; the layout "
            + "is documented in dev.rungbook.quant.Export), or with --dequantized the float32 values the codes stand "
            + "for. Tensors not selected by --tensors are copied unchanged. Tensors are read, quantized and written "
            + "one at a time.",
            SpecConverter.EXIT_CODES})
final class QuantizeCommand implements Callable<Integer> {
    @Spec
    CommandSpec spec;

    @Parameters(index = "0", paramLabel = "FILE", description = "The checkpoint to quantize.")
    Path file;

    @Option(names = "--spec", paramLabel = "SPEC", converter = SpecConverter.class,
            description = SpecConverter.HELP)
    Quantizer quantizer;

    @Option(names = "--plan", paramLabel = "PLAN.json", description = "Instead of --spec: a plan written by "
            + "'rungbook plan'; each planned LAYER.weight is quantized with its layer's spec, every other tensor is "
            + "copied unchanged.")
    Path planFile;

    @Mixin
    TensorSelection selection;

    @Option(names = "--out", required = true, paramLabel = "OUT", description = "The .safetensors file to write "
            + "(never the input).")
    Path out;

    @Option(names = "--report", paramLabel = "REPORT", description = "Also write an error report: .html (tables and "
            + "charts), .json or .csv, by extension.")
    Path report;

    @Option(names = "--dequantized", description = "Write the dequantized float32 values instead of the codes.")
    boolean dequantized;

    @Option(names = "--keep-unfit", description = "Copy selected tensors that the spec does not fit (for example a "
            + "1-D bias under per-group(1,128)) instead of failing.")
    boolean keepUnfit;

    @Override
    public Integer call() throws Exception {
        if (!out.getFileName().toString().toLowerCase(Locale.ROOT).endsWith(".safetensors")) {
            throw new ParameterException(spec.commandLine(), "--out must name a .safetensors file, got " + out);
        }
        if ((quantizer == null) == (planFile == null)) {
            throw new ParameterException(spec.commandLine(), "give exactly one of --spec SPEC and --plan PLAN.json");
        }
        if (planFile != null && !selection.globs.isEmpty()) {
            throw new ParameterException(spec.commandLine(), "--tensors does not apply with --plan (the plan names "
                    + "its tensors)");
        }
        if (report != null && Report.kind(report) == null) {
            throw new ParameterException(spec.commandLine(), "--report must end in .html, .json or .csv, got "
                    + report);
        }
        PrintWriter stdout = spec.commandLine().getOut();
        return Failures.guard("quantize", spec.commandLine().getErr(), () -> run(stdout));
    }

    private int run(PrintWriter stdout) throws Exception {
        if (!Files.isRegularFile(file)) {
            throw new IllegalArgumentException("no checkpoint file at " + file.toAbsolutePath());
        }
        Plan plan = planFile == null ? null : Plan.read(planFile);
        try (Checkpoint c = Checkpoint.open(file)) {
            Export e = Export.of(c);
            List<String> globs = selection.globsOrAll();
            String what;
            if (plan != null) {
                Map<String, Quantizer> byTensor = new LinkedHashMap<>();
                for (String layer : plan.layers()) {
                    String name = layer + ".weight";
                    if (!c.contains(name)) {
                        throw new IllegalArgumentException(planFile + " plans layer '" + layer + "', but " + file
                                + " has no tensor '" + name + "'; names: " + preview(c.names()));
                    }
                    byTensor.put(name, plan.spec(layer));
                }
                e = e.specs(byTensor);
                what = "the plan " + planFile.getFileName() + " (" + plan.layers().size() + " layers)";
            } else {
                for (String g : globs) {
                    e = e.spec(g, quantizer);
                }
                what = "'" + (SpecText.hasText(quantizer) ? quantizer.toText() : quantizer.label()) + "'";
            }
            if (keepUnfit) {
                e = e.keepUnfit();
            }
            if (dequantized) {
                e = e.dequantized();
            }
            int selected = 0;
            for (String n : c.names()) {
                if (e.specFor(n) != null) {
                    selected++;
                }
            }
            if (selected == 0) {
                throw new IllegalArgumentException(file + ": no tensor matches --tensors " + globs + (keepUnfit
                        ? " and fits the spec" : "") + "; names: " + preview(c.names()));
            }
            Rows rows = new Rows();
            String shown = "quantize " + file.getFileName();
            e.write(out, new OneTaskProgress(TerminalProgress.toStderr(), "export " + out.getFileName(), shown),
                    rows::add);
            long inBytes = Files.size(file);
            long outBytes = Files.size(out);
            Table table = rows.table();
            Table summary = ResultTables.summary(table);
            stdout.printf(Locale.ROOT, "%s: %d of %d tensors %s with %s -> %s (%d bytes, %.3f of the input's %d)%n",
                    file, selected, c.names().size(), dequantized ? "quantized and dequantized" : "quantized", what,
                    out, outBytes, outBytes / (double) Math.max(1, inBytes), inBytes);
            stdout.print(ResultTables.text(summary));
            if (report != null) {
                List<IChart> charts = new ArrayList<>();
                IChart heat = ResultTables.sqnrHeatMap(table, "SQNR (dB) per tensor", false);
                if (heat != null) {
                    charts.add(heat);
                }
                List<String> notes = List.of("Input: " + file + " (" + inBytes + " bytes). Output: " + out + " ("
                        + outBytes + " bytes" + (dequantized ? ", dequantized float32" : ", quantized export") + ").",
                        (plan != null ? "Plan: " + planFile + " (" + plan.specs() + ")" : "Spec: " + quantizer.label())
                        + ". " + selected + " of " + c.names().size()
                        + " tensors quantized; the others were copied unchanged.",
                        "bits_per_weight and bytes count bit-packed codes plus scales and zero points.");
                Report.write(report, "rungbook quantize " + file.getFileName(), notes, summary, table, charts);
                stdout.println("report: " + report);
            }
            stdout.flush();
        }
        return 0;
    }

    static String preview(List<String> names) {
        List<String> first = names.subList(0, Math.min(8, names.size()));
        return first + (names.size() > first.size() ? " and " + (names.size() - first.size()) + " more" : "");
    }

    /** Per-tensor report rows, collected as each tensor is written (nothing of the tensor is kept). */
    static final class Rows {
        private final StringColumn tensor = StringColumn.create(StudyResult.TENSOR);
        private final StringColumn shape = StringColumn.create("shape");
        private final StringColumn specs = StringColumn.create(StudyResult.SPEC);
        private final IntColumn elements = IntColumn.create(StudyResult.ELEMENTS);
        private final DoubleColumn bpw = DoubleColumn.create(StudyResult.BITS_PER_WEIGHT);
        private final LongColumn bytes = LongColumn.create(StudyResult.BYTES);
        private final List<DoubleColumn> metrics = new ArrayList<>();

        Rows() {
            for (String m : ErrorReport.METRICS) {
                metrics.add(DoubleColumn.create(m));
            }
        }

        void add(Quantized r) {
            tensor.append(r.source().name());
            shape.append(java.util.Arrays.toString(r.source().shape()).replace(" ", ""));
            specs.append(r.spec().label());
            elements.append(r.source().size());
            bpw.append(r.bitsPerWeight());
            bytes.append(r.bytes());
            double[] v = r.error().values();
            for (int k = 0; k < metrics.size(); k++) {
                metrics.get(k).append(v[k]);
            }
        }

        Table table() {
            Table t = Table.create("quantize", tensor, shape, specs, elements, bpw, bytes);
            metrics.forEach(t::addColumns);
            return t;
        }
    }
}
