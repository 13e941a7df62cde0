package dev.rungbook.cli;

import dev.rungbook.io.Checkpoint;
import dev.rungbook.io.TensorInfo;
import dev.rungbook.quant.Quantizer;
import dev.rungbook.study.Study;
import java.io.PrintWriter;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.ArrayList;
import java.util.Arrays;
import java.util.HashSet;
import java.util.List;
import java.util.Set;
import java.util.concurrent.Callable;
import org.knowm.xchart.internal.chartpart.IChart;
import picocli.CommandLine.Command;
import picocli.CommandLine.Mixin;
import picocli.CommandLine.Model.CommandSpec;
import picocli.CommandLine.Option;
import picocli.CommandLine.ParameterException;
import picocli.CommandLine.Parameters;
import picocli.CommandLine.Spec;
import tech.tablesaw.api.Table;

/** {@code rungbook study FILE --spec SPEC --spec SPEC ...}: compares specs over the tensors of a checkpoint. */
@Command(name = "study", mixinStandardHelpOptions = true,
        description = {"Compare quantizer specs over the tensors of a checkpoint: bits per weight, bytes and error "
            + "metrics (MSE, SQNR, cosine, ...) per tensor and spec, and a summary per spec. Each tensor is read once "
            + "(memory-mapped) for all specs and dropped before the next, so a checkpoint larger than memory can be "
            + "studied.",
            SpecConverter.EXIT_CODES})
final class StudyCommand implements Callable<Integer> {
    @Spec
    CommandSpec spec;

    @Parameters(index = "0", paramLabel = "FILE", description = "The checkpoint to study.")
    Path file;

    @Option(names = "--spec", required = true, paramLabel = "SPEC", converter = SpecConverter.class,
            description = {SpecConverter.HELP, "Repeat for each spec to compare."})
    List<Quantizer> specs;

    @Mixin
    TensorSelection selection;

    @Option(names = "--report", paramLabel = "REPORT", description = "Also write a report: .html (tables and charts "
            + "embedded), .json or .csv (one row per tensor and spec), by extension.")
    Path report;

    @Option(names = "--skip-unfit", description = "Leave out tensors that some spec does not fit (for example a 1-D "
            + "bias under per-group(1,128)) instead of failing.")
    boolean skipUnfit;

    private static int[] intShape(TensorInfo info) {
        long[] l = info.shape();
        int[] s = new int[l.length];
        for (int k = 0; k < l.length; k++) {
            s[k] = (int) l[k];
        }
        return s;
    }

    @Override
    public Integer call() throws Exception {
        if (report != null && Report.kind(report) == null) {
            throw new ParameterException(spec.commandLine(), "--report must end in .html, .json or .csv, got "
                    + report);
        }
        Set<Quantizer> seen = new HashSet<>();
        for (Quantizer q : specs) {
            if (!seen.add(q)) {
                throw new ParameterException(spec.commandLine(), "--spec '" + q.label() + "' is given twice");
            }
        }
        PrintWriter out = spec.commandLine().getOut();
        return Failures.guard("study", spec.commandLine().getErr(), () -> run(out));
    }

    private int run(PrintWriter out) throws Exception {
        if (!Files.isRegularFile(file)) {
            throw new IllegalArgumentException("no checkpoint file at " + file.toAbsolutePath());
        }
        try (Checkpoint c = Checkpoint.open(file)) {
            Study s = Study.of(c);
            if (!selection.globs.isEmpty()) {
                java.util.function.Predicate<String> keep = selection.matcher();
                if (c.names().stream().noneMatch(keep)) {
                    throw new IllegalArgumentException(file + ": no tensor matches --tensors " + selection.globs
                            + "; names: " + QuantizeCommand.preview(c.names()));
                }
                s = s.filter(keep);
            }
            List<String> skipped = new ArrayList<>();
            for (String n : s.tensorNames()) {
                TensorInfo info = c.info(n);
                for (Quantizer q : specs) {
                    String problem = !info.fitsInTensor() ? "too large to load as one tensor"
                            : q.shapeProblem(intShape(info)).orElse(null);
                    if (problem != null && !skipUnfit) {
                        throw new IllegalArgumentException(file + ": tensor '" + n + "' " + Arrays.toString(info.shape())
                                + ": " + problem + " (spec " + q.label() + "); narrow --tensors, or add --skip-unfit");
                    }
                    if (problem != null) {
                        skipped.add(n);
                        break;
                    }
                }
            }
            if (!skipped.isEmpty()) {
                if (skipped.size() == s.tensorNames().size()) {
                    throw new IllegalArgumentException(file + ": no selected tensor fits every spec");
                }
                s = s.filter(n -> !skipped.contains(n));
            }
            int count = s.tensorNames().size();
            Table rows = s.progress(new OneTaskProgress(TerminalProgress.toStderr(), "study",
                    "study " + file.getFileName())).compare(specs.toArray(new Quantizer[0])).table();
            Table summary = ResultTables.summary(rows);
            out.printf("%s: %d tensors x %d specs%s%n", file, count, specs.size(), skipped.isEmpty() ? ""
                    : " (skipped, as some spec does not fit them: " + String.join(", ", skipped) + ")");
            out.print(ResultTables.text(summary));
            if (report != null) {
                List<IChart> charts = new ArrayList<>();
                IChart bits = ResultTables.sqnrVsBits(summary);
                if (bits != null) {
                    charts.add(bits);
                }
                IChart heat = ResultTables.sqnrHeatMap(rows, "SQNR (dB) per tensor and spec", true);
                if (heat != null) {
                    charts.add(heat);
                }
                List<String> notes = List.of("Checkpoint: " + file + ", " + count + " tensors, " + specs.size()
                        + " specs.", "bits_per_weight counts bit-packed codes plus scales and zero points; the summary"
                        + " weights bits and MSE by element count; sqnr_db_mean is the mean over tensors of their SQNR"
                        + " (finite values), sqnr_db_min the worst tensor.", skipped.isEmpty() ? ""
                        : "Skipped (some spec does not fit them): " + String.join(", ", skipped) + ".");
                Report.write(report, "rungbook study " + file.getFileName(), notes, summary, rows, charts);
                out.println("report: " + report);
            }
            out.flush();
        }
        return 0;
    }
}
