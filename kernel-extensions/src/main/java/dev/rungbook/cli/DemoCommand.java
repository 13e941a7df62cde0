package dev.rungbook.cli;

import dev.rungbook.io.Checkpoint;
import dev.rungbook.metrics.TensorStats;
import dev.rungbook.tensor.Tensor;
import java.io.IOException;
import java.io.PrintStream;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.Arrays;
import java.util.List;
import java.util.Locale;
import java.util.concurrent.Callable;
import java.util.stream.Collectors;
import java.util.stream.Stream;
import picocli.CommandLine.Command;
import picocli.CommandLine.Option;

/** {@code rungbook demo}: opens every sample checkpoint and prints a summary of each tensor. */
@Command(name = "demo", mixinStandardHelpOptions = true,
        description = "Run the demo on the embedded sample checkpoints: inspect every sample tensor.")
final class DemoCommand implements Callable<Integer> {
    @Option(names = "--samples", description = "Folder of sample checkpoints (default: ${DEFAULT-VALUE}).",
            defaultValue = "sample-tensors")
    Path samples;

    @Override
    public Integer call() throws IOException {
        return run(samples, System.out);
    }

    static int run(Path folder, PrintStream out) throws IOException {
        if (!Files.isDirectory(folder)) {
            System.err.println("rungbook demo: no sample folder at " + folder.toAbsolutePath());
            return 1;
        }
        List<Path> files;
        try (Stream<Path> s = Files.list(folder)) {
            files = s.filter(DemoCommand::isCheckpoint).sorted().collect(Collectors.toList());
        }
        if (files.isEmpty()) {
            System.err.println("rungbook demo: no checkpoints in " + folder.toAbsolutePath()
                    + " (make them with ./rungbook samples)");
            return 1;
        }
        out.println("Rungbook demo: inspecting " + files.size() + " sample files in " + folder.toAbsolutePath()
                .normalize());
        for (Path f : files) {
            inspect(f, out);
        }
        return 0;
    }

    static boolean isCheckpoint(Path p) {
        String n = p.getFileName().toString();
        return n.endsWith(".safetensors") || n.endsWith(".npz") || n.endsWith(".npy");
    }

    static void inspect(Path file, PrintStream out) throws IOException {
        try (Checkpoint c = Checkpoint.open(file)) {
            out.printf(Locale.ROOT, "%n%s (%,d bytes, %d tensors)%n", file.getFileName(), Files.size(file),
                    c.names().size());
            c.metadata().forEach((k, v) -> out.printf(Locale.ROOT, "  %s: %s%n", k, v));
            out.printf(Locale.ROOT, "  %-14s %-6s %-12s %10s %10s %10s %10s %8s%n", "tensor", "dtype", "shape", "min",
                    "max", "mean", "std", "kurt");
            for (String name : c.names()) {
                Tensor t = c.tensor(name);
                TensorStats s = TensorStats.of(t);
                out.printf(Locale.ROOT, "  %-14s %-6s %-12s %10.4g %10.4g %10.4g %10.4g %8.2f%n", name, t.dtype(),
                        Arrays.toString(t.shape()).replace(" ", ""), s.min(), s.max(), s.mean(), s.std(),
                        s.kurtosis());
            }
        }
    }
}
