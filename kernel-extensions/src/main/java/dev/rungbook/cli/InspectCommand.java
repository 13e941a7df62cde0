package dev.rungbook.cli;

import com.google.gson.GsonBuilder;
import com.google.gson.JsonArray;
import com.google.gson.JsonNull;
import com.google.gson.JsonObject;
import com.google.gson.JsonPrimitive;
import dev.rungbook.io.Checkpoint;
import dev.rungbook.io.TensorInfo;
import dev.rungbook.metrics.TensorStats;
import dev.rungbook.progress.Progress;
import dev.rungbook.render.TableRenderer;
import java.io.PrintWriter;
import java.nio.file.Path;
import java.util.ArrayList;
import java.util.Arrays;
import java.util.List;
import java.util.concurrent.Callable;
import picocli.CommandLine.Command;
import picocli.CommandLine.Model.CommandSpec;
import picocli.CommandLine.Option;
import picocli.CommandLine.Parameters;
import picocli.CommandLine.Spec;

/** {@code rungbook inspect FILE [--json]}: tensor names, dtypes, shapes and statistics. */
@Command(name = "inspect", mixinStandardHelpOptions = true,
        description = {"List the tensors of a checkpoint (.safetensors, sharded index, .npy, .npz): name, dtype, "
            + "shape, element count and statistics (min, max, mean, std, max |x|, NaN and infinity counts). Tensors "
            + "are read one at a time (memory-mapped), so a checkpoint larger than memory can be inspected.",
            "Exit codes: 0 ok, 1 the file cannot be read, 2 usage error."})
final class InspectCommand implements Callable<Integer> {
    @Spec
    CommandSpec spec;

    @Parameters(index = "0", paramLabel = "FILE", description = "The checkpoint.")
    Path file;

    @Option(names = "--json", description = "Print JSON (file, format, metadata, tensors with statistics) instead of a "
            + "table.")
    boolean json;

    @Option(names = "--no-stats", description = "Only names, dtypes and shapes: read no tensor values.")
    boolean noStats;

    @Override
    public Integer call() throws Exception {
        PrintWriter out = spec.commandLine().getOut();
        return Failures.guard("inspect", spec.commandLine().getErr(), () -> {
            try (Checkpoint c = Checkpoint.open(file)) {
                List<double[]> stats = stats(c, !noStats, json ? Progress.silent() : TerminalProgress.toStderr());
                out.print(json ? json(c, stats) : text(c, stats));
                out.flush();
            }
            return 0;
        });
    }

    /** The text table of {@code c} with statistics, as {@code rungbook inspect FILE} prints it (the demo's too). */
    static String describe(Checkpoint c) {
        return text(c, stats(c, true, Progress.silent()));
    }

    /** Per tensor the numbers shown (null when not read), so that no tensor stays referenced once they are known. */
    private static List<double[]> stats(Checkpoint c, boolean read, Progress bar) {
        List<String> names = c.names();
        List<double[]> stats = new ArrayList<>();
        String task = "inspect " + c.path().getFileName();
        for (int i = 0; i < names.size(); i++) {
            TensorInfo info = c.info(names.get(i));
            stats.add(read && info.fitsInTensor() ? summary(TensorStats.of(c.tensor(names.get(i)))) : null);
            if (read) {
                bar.update(task, i + 1, names.size(), Double.NaN);
            }
        }
        if (read && !names.isEmpty()) {
            bar.finish(task);
        }
        return stats;
    }

    private static final String[] STATS = {"min", "max", "mean", "std", "max|x|", "ex.kurt", "nan", "inf"};
    private static final String[] JSON_KEYS = {"min", "max", "mean", "std", "abs_max", "excess_kurtosis"};

    private static double[] summary(TensorStats s) {
        return new double[] {s.min(), s.max(), s.mean(), s.std(), s.absMax(), s.kurtosis(), s.nanCount(),
            s.infCount()};
    }

    private static String shape(long[] s) {
        return Arrays.toString(s).replace(" ", "");
    }

    private static String text(Checkpoint c, List<double[]> stats) {
        List<String> names = c.names();
        List<String[]> rows = new ArrayList<>();
        boolean withStats = stats.stream().anyMatch(s -> s != null);
        List<String> header = new ArrayList<>(List.of("name", "dtype", "shape", "elements"));
        if (withStats) {
            header.addAll(List.of(STATS));
        }
        rows.add(header.toArray(new String[0]));
        long total = 0;
        for (int i = 0; i < names.size(); i++) {
            TensorInfo info = c.info(names.get(i));
            total += info.byteSize();
            double[] s = stats.get(i);
            List<String> r = new ArrayList<>(List.of(info.name(), info.dtype().safetensorsName(), shape(info.shape()),
                    Long.toString(info.elementCount())));
            if (withStats) {
                for (int k = 0; k < STATS.length; k++) {
                    r.add(s == null ? "-" : k < JSON_KEYS.length ? TableRenderer.number(s[k]) : Long.toString((long) s[k]));
                }
            }
            rows.add(r.toArray(new String[0]));
        }
        int[] w = new int[rows.get(0).length];
        for (String[] r : rows) {
            for (int k = 0; k < r.length; k++) {
                w[k] = Math.max(w[k], r[k].length());
            }
        }
        StringBuilder b = new StringBuilder();
        b.append(c.path()).append(" (").append(c.format()).append(", ").append(names.size()).append(" tensor")
                .append(names.size() == 1 ? "" : "s").append(", ").append(total).append(" bytes of data)\n");
        for (String[] r : rows) {
            StringBuilder line = new StringBuilder();
            for (int k = 0; k < r.length; k++) {
                boolean right = k >= 3;
                String cell = right ? " ".repeat(w[k] - r[k].length()) + r[k] : r[k] + " ".repeat(w[k] - r[k].length());
                line.append(k == 0 ? "" : "  ").append(cell);
            }
            b.append(line.toString().stripTrailing()).append('\n');
        }
        if (!c.metadata().isEmpty()) {
            b.append("metadata:\n");
            c.metadata().forEach((k, v) -> b.append("  ").append(k).append(" = ").append(v).append('\n'));
        }
        return b.toString();
    }

    private static JsonPrimitive num(double v) {
        return new JsonPrimitive(v);
    }

    private static String json(Checkpoint c, List<double[]> stats) {
        JsonObject root = new JsonObject();
        root.addProperty("file", c.path().toString());
        root.addProperty("format", c.format());
        JsonObject meta = new JsonObject();
        c.metadata().forEach(meta::addProperty);
        root.add("metadata", meta);
        JsonArray ts = new JsonArray();
        List<String> names = c.names();
        for (int i = 0; i < names.size(); i++) {
            TensorInfo info = c.info(names.get(i));
            JsonObject o = new JsonObject();
            o.addProperty("name", info.name());
            o.addProperty("dtype", info.dtype().safetensorsName());
            JsonArray shape = new JsonArray();
            for (long d : info.shape()) {
                shape.add(d);
            }
            o.add("shape", shape);
            o.addProperty("elements", info.elementCount());
            o.addProperty("bytes", info.byteSize());
            double[] s = stats.get(i);
            if (s == null) {
                o.add("stats", JsonNull.INSTANCE);
            } else {
                JsonObject st = new JsonObject();
                for (int k = 0; k < JSON_KEYS.length; k++) {
                    st.add(JSON_KEYS[k], Double.isFinite(s[k]) ? num(s[k]) : JsonNull.INSTANCE);
                }
                st.addProperty("nan", (long) s[JSON_KEYS.length]);
                st.addProperty("inf", (long) s[JSON_KEYS.length + 1]);
                o.add("stats", st);
            }
            ts.add(o);
        }
        root.add("tensors", ts);
        return new GsonBuilder().setPrettyPrinting().disableHtmlEscaping().serializeNulls().create().toJson(root) + "\n";
    }
}
