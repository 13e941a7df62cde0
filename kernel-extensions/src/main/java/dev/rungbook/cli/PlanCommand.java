package dev.rungbook.cli;

import dev.rungbook.chart.Charts;
import dev.rungbook.io.Checkpoint;
import dev.rungbook.nn.Dataset;
import dev.rungbook.nn.Network;
import dev.rungbook.plan.Allocation;
import dev.rungbook.plan.BitBudget;
import dev.rungbook.plan.Candidate;
import dev.rungbook.plan.Objective;
import dev.rungbook.plan.Plan;
import dev.rungbook.plan.Sensitivity;
import dev.rungbook.plan.SensitivityResult;
import dev.rungbook.quant.Quantizer;
import dev.rungbook.tensor.Tensor;
import java.io.PrintWriter;
import java.io.UncheckedIOException;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.ArrayList;
import java.util.Arrays;
import java.util.HashSet;
import java.util.LinkedHashMap;
import java.util.List;
import java.util.Locale;
import java.util.Map;
import java.util.Set;
import java.util.concurrent.Callable;
import picocli.CommandLine;
import picocli.CommandLine.Command;
import picocli.CommandLine.Model.CommandSpec;
import picocli.CommandLine.Option;
import picocli.CommandLine.Parameters;
import picocli.CommandLine.Spec;

/** {@code rungbook plan}: sensitivity per layer and candidate, then the best plan under a byte budget. */
@Command(name = "plan", mixinStandardHelpOptions = true,
        description = {"Choose a quantizer per layer under a byte budget and write the plan as JSON.",
            "Quantizes each layer alone with each candidate, measures the network's output error on DATA, then picks "
                + "one candidate per layer that minimises the summed error while the quantized weights (codes, "
                + "scales, zero points; biases stay float and are not counted) fit the budget.",
            "The network is read from FILE by its architecture text (--network, else the file's 'architecture' "
                + "metadata, which the sample checkpoints carry), or else as a multilayer perceptron: every "
                + "NAME.weight of rank 2 that has a NAME.bias, in file order, with a ReLU between consecutive layers "
                + "(override the names with --layers).",
            "Exit codes: 0 ok, 2 usage error, 1 failure."},
        footer = {"", "Example:", "  rungbook plan sample-tensors/conveyor-mlp.f32.safetensors --budget 40KiB \\",
            "      --data sample-tensors/conveyor-validation.npz \\",
            "      --candidates int8 int4 'g24=int4 per-group(1,24)' --out plan.json",
            "  rungbook plan sample-tensors/thermal-cnn.f32.safetensors --budget 2KiB \\",
            "      --data sample-tensors/thermal-validation.npz --out cnn-plan.json"})
final class PlanCommand implements Callable<Integer> {
    @Spec
    CommandSpec spec;

    @Parameters(index = "0", paramLabel = "FILE", description = "Checkpoint (.safetensors, sharded index, .npz).")
    Path file;

    @Option(names = "--budget", required = true, paramLabel = "SIZE",
            description = "Bytes for all quantized weights: 36000, 40KiB, 3.5MiB, 1GiB (also kB, MB, GB).")
    String budget;

    @Option(names = "--data", required = true, paramLabel = "DATA",
            description = "An .npz (or other checkpoint) with tensor 'inputs' [N, features] and optionally "
                + "'labels' [N]; without labels the accuracy columns stay empty.")
    Path data;

    @Option(names = "--candidates", arity = "1..*", paramLabel = "[LABEL=]SPEC",
            description = {"Candidate specs in spec text form, each optionally labelled, e.g. "
                + "int8 int4 'g32=int4 per-group(1,32)' (default: int8 int6 int4 int3 int2, per output channel)."})
    List<String> candidates;

    @Option(names = "--objective", paramLabel = "NAME", defaultValue = "kl",
            description = "What to minimise summed over layers: kl (softmax KL divergence), mse (logit MSE) or "
                + "accuracy (accuracy drop, needs labels). Default: ${DEFAULT-VALUE}.")
    String objective;

    @Option(names = "--rerank", paramLabel = "N", defaultValue = "8",
            description = "Measure the N most promising plans that fit, and the uniform ones, and keep the best "
                + "measured; 0 keeps the predicted optimum. Default: ${DEFAULT-VALUE}.")
    int rerank;

    @Option(names = "--layers", split = ",", paramLabel = "NAME",
            description = "Linear layer names of a multilayer perceptron, in order (default: found in FILE, see "
                + "above).")
    List<String> layers;

    @Option(names = "--network", paramLabel = "TEXT",
            description = {"The architecture text, e.g. 'conv1 stride 1 padding 1 -> bn1 -> relu -> maxpool 2/2 "
                + "-> flatten -> fc' (layers read by name from FILE; grammar: Network.fromArchitecture). Default: "
                + "FILE's 'architecture' metadata when it has one."})
    String network;

    @Option(names = "--out", paramLabel = "PLAN.json",
            description = "Write the plan here (atomically); without it the plan JSON goes to standard output and "
                + "the summary to standard error.")
    Path out;

    @Option(names = "--charts", paramLabel = "DIR",
            description = "Also write sensitivity.png (heat map) and pareto.png (size vs accuracy) to DIR.")
    Path charts;

    @Override
    public Integer call() {
        PrintWriter stdout = spec.commandLine().getOut();
        PrintWriter err = spec.commandLine().getErr();
        long budgetBytes;
        List<Candidate> cands;
        Objective obj;
        try {
            budgetBytes = BitBudget.parseBytes(budget);
            cands = candidates == null ? Candidate.defaults() : parseCandidates(candidates);
            obj = Objective.parse(objective);
        } catch (IllegalArgumentException e) {
            throw new CommandLine.ParameterException(spec.commandLine(), e.getMessage(), e);
        }
        if (rerank < 0) {
            throw new CommandLine.ParameterException(spec.commandLine(), "--rerank " + rerank + " is negative");
        }
        if (out != null && Files.exists(file) && Files.exists(out) && sameFile(out, file)) {
            throw new CommandLine.ParameterException(spec.commandLine(), "--out " + out
                    + " is the input checkpoint; refusing to overwrite it");
        }
        PrintWriter summary = out == null ? err : stdout;
        try {
            Network net = readNetwork(file, network, layers);
            Tensor calibration = null;
            try (Checkpoint d = Checkpoint.open(data)) {
                if (!d.contains("inputs")) {
                    throw new IllegalArgumentException(data + ": no tensor 'inputs' among " + d.names());
                }
                if (!d.contains("labels")) {
                    Tensor x = d.tensor("inputs");
                    calibration = Tensor.of(x.toFloatArray(), x.shape()).withName("inputs");
                }
            }
            SensitivityResult s;
            try {
                Sensitivity sens = calibration == null ? Sensitivity.of(net, Dataset.load(data))
                        : Sensitivity.of(net, calibration);
                s = sens.candidates(cands).progress(TerminalProgress.toStderr()).measure();
            } catch (IllegalArgumentException e) {
                throw new IllegalArgumentException(data + ": " + e.getMessage(), e);
            }
            BitBudget b = BitBudget.of(s).objective(obj).rerank(rerank);
            Allocation a = b.solve(budgetBytes);
            report(summary, s, b, a);
            Plan plan = a.plan().withInfo("source", file.getFileName().toString());
            if (out != null) {
                plan.write(out);
                summary.println("wrote " + out.toAbsolutePath().normalize());
            } else {
                stdout.print(plan.toJson());
            }
            if (charts != null) {
                Files.createDirectories(charts);
                Charts.savePng(s.heatMap(obj), charts.resolve("sensitivity.png"));
                Charts.savePng(b.paretoChart(a), charts.resolve("pareto.png"));
                summary.println("wrote charts to " + charts.toAbsolutePath().normalize());
            }
            summary.flush();
            stdout.flush();
            return 0;
        } catch (IllegalArgumentException | UncheckedIOException | java.io.IOException e) {
            err.println("rungbook plan: " + e.getMessage());
            err.flush();
            return 1;
        }
    }

    private static boolean sameFile(Path a, Path b) {
        try {
            return Files.isSameFile(a, b);
        } catch (java.io.IOException e) {
            return false;
        }
    }

    /** {@code [LABEL=]SPEC} values; a bad spec names its token. */
    static List<Candidate> parseCandidates(List<String> values) {
        List<Candidate> out = new ArrayList<>();
        for (String v : values) {
            int eq = v.indexOf('=');
            String label = eq > 0 ? v.substring(0, eq).trim() : null;
            String text = eq > 0 ? v.substring(eq + 1).trim() : v.trim();
            Quantizer q;
            try {
                q = Quantizer.parse(text);
            } catch (IllegalArgumentException e) {
                throw new IllegalArgumentException("--candidates '" + v + "': " + e.getMessage(), e);
            }
            out.add(label == null ? Candidate.of(text, q) : Candidate.of(label, q));
        }
        return out;
    }

    /**
     * The network of {@code file}: from the architecture text (given, or the file's {@code architecture} metadata
     * unless linear names are given), else the MLP of the given linear names or of every NAME.weight of rank 2 with a
     * NAME.bias.
     */
    static Network readNetwork(Path file, String architecture, List<String> names) {
        try (Checkpoint c = Checkpoint.open(file)) {
            String text = architecture != null ? architecture
                    : names == null || names.isEmpty() ? c.metadata().get("architecture") : null;
            if (text != null) {
                return fromArchitecture(file, c, text, architecture == null);
            }
            List<String> linear = new ArrayList<>();
            if (names != null && !names.isEmpty()) {
                linear.addAll(names);
            } else {
                for (String n : c.names()) {
                    if (n.endsWith(".weight") && c.info(n).shape().length == 2) {
                        String base = n.substring(0, n.length() - ".weight".length());
                        if (c.contains(base + ".bias")) {
                            linear.add(base);
                        }
                    }
                }
                if (linear.isEmpty()) {
                    throw new IllegalArgumentException(file + ": no linear layer (NAME.weight of rank 2 with a "
                            + "NAME.bias) among " + c.names());
                }
            }
            Map<String, Tensor> loaded = new LinkedHashMap<>();
            for (String l : linear) {
                for (String n : List.of(l + ".weight", l + ".bias")) {
                    if (!c.contains(n)) {
                        throw new IllegalArgumentException(file + ": no tensor '" + n + "' for layer '" + l + "'");
                    }
                    Tensor t = c.tensor(n);
                    loaded.put(n, Tensor.of(t.toFloatArray(), t.shape()).withName(n));
                }
            }
            try {
                return Network.mlp(loaded, linear.toArray(new String[0]));
            } catch (IllegalArgumentException e) {
                throw new IllegalArgumentException(file + ": " + e.getMessage(), e);
            }
        }
    }

    private static Network fromArchitecture(Path file, Checkpoint c, String text, boolean fromMetadata) {
        Set<String> tokens = new HashSet<>(Arrays.asList(text.split("[^A-Za-z0-9_.]+")));
        Map<String, Tensor> loaded = new LinkedHashMap<>();
        for (String n : c.names()) {
            int dot = n.lastIndexOf('.');
            if (dot > 0 && tokens.contains(n.substring(0, dot))) {
                Tensor t = c.tensor(n);
                loaded.put(n, Tensor.of(t.toFloatArray(), t.shape()).withName(n));
            }
        }
        try {
            return Network.fromArchitecture(loaded, text);
        } catch (IllegalArgumentException e) {
            throw new IllegalArgumentException(file + (fromMetadata ? " (its 'architecture' metadata)" : "") + ": "
                    + e.getMessage(), e);
        }
    }

    private static void report(PrintWriter w, SensitivityResult s, BitBudget b, Allocation a) {
        w.println(String.format(Locale.ROOT, "float network: %s", s.hasLabels()
                ? String.format(Locale.ROOT, "accuracy %.4f", s.floatAccuracy()) : "no labels in the data"));
        w.println(a.table().print());
        w.println(String.format(Locale.ROOT, "plan: %,d of %,d bytes; %s predicted %.4g, measured %.4g",
                a.bytes(), a.budget(), a.objective().column(), a.predicted(), a.measured()));
        if (s.hasLabels()) {
            w.println(String.format(Locale.ROOT, "accuracy: predicted %.4f, measured %.4f (float %.4f)",
                    a.predictedAccuracy(), a.measuredAccuracy(), a.floatAccuracy()));
        }
        w.println(String.format(Locale.ROOT, "top-1 agreement with the float network: %.4f",
                a.measuredAgreement()));
        if (!b.exact()) {
            w.println("note: the frontier was thinned (too many partial plans); the plan fits but may not be optimal");
        }
        w.println("uniform baselines:");
        for (Allocation u : b.uniformBaselines()) {
            w.println(String.format(Locale.ROOT, "  all %-10s %,10d bytes  %s", u.candidates().get(0), u.bytes(),
                    s.hasLabels() ? String.format(Locale.ROOT, "accuracy %.4f", u.measuredAccuracy())
                            : String.format(Locale.ROOT, "agreement %.4f", u.measuredAgreement())));
        }
    }
}
