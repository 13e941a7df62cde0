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
                List<String> names = c.names();
                Progress bar = TerminalProgress.toStderr();
                List<double[]> stats = new ArrayList<>();
                for (int i = 0; i < names.size(); i++) {
                    TensorInfo info = c.info(names.get(i));
                    boolean load = !noStats && info.fitsInTensor();
                    stats.add(load ? summary(TensorStats.of(c.tensor(names.get(i)))) : null);
                    if (!noStats && !json) {
                        bar.update("inspect " + file.getFileName(), i + 1, names.size(), Double.NaN);
                    }
                }
                if (!noStats && !json && !names.isEmpty()) {
                    bar.finish("inspect");
                }
                out.print(json ? json(c, stats) : text(c, stats));
                out.flush();
            }
            return 0;
        });
    }

    /** The numbers shown, so that no tensor stays referenced once its statistics are known. */
    private static double[] summary(TensorStats s) {
        return new double[] {s.min(), s.max(), s.mean(), s.std(), s.absMax(), s.nanCount(), s.infCount()};
    }

    private static String shape(long[] s) {
        return Arrays.toString(s).replace(" ", "");
    }

    private static String text(Checkpoint c, List<double[]> stats) {
        List<String> names = c.names();
        List<String[]> rows = new ArrayList<>();
        boolean withStats = stats.stream().anyMatch(s -> s != null);
        rows.add(withStats ? new String[] {"name", "dtype", "shape", "elements", "min", "max", "mean", "std", "max|x|",
            "nan", "inf"} : new String[] {"name", "dtype", "shape", "elements"});
        long total = 0;
        for (int i = 0; i < names.size(); i++) {
            TensorInfo info = c.info(names.get(i));
            total += info.byteSize();
            double[] s = stats.get(i);
            List<String> r = new ArrayList<>(List.of(info.name(), info.dtype().safetensorsName(), shape(info.shape()),
                    Long.toString(info.elementCount())));
            if (withStats) {
                if (s == null) {
                    r.addAll(List.of("-", "-", "-", "-", "-", "-", "-"));
                } else {
                    for (int k = 0; k < 5; k++) {
                        r.add(TableRenderer.number(s[k]));
                    }
                    r.add(Long.toString((long) s[5]));
                    r.add(Long.toString((long) s[6]));
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
                String[] keys = {"min", "max", "mean", "std", "abs_max"};
                for (int k = 0; k < keys.length; k++) {
                    st.add(keys[k], Double.isFinite(s[k]) ? num(s[k]) : JsonNull.INSTANCE);
                }
                st.addProperty("nan", (long) s[5]);
                st.addProperty("inf", (long) s[6]);
                o.add("stats", st);
            }
            ts.add(o);
        }
        root.add("tensors", ts);
        return new GsonBuilder().setPrettyPrinting().disableHtmlEscaping().serializeNulls().create().toJson(root) + "\n";
    }
}
