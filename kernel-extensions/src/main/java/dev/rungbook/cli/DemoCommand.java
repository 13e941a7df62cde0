package dev.rungbook.cli;

import dev.rungbook.install.KernelSpec;
import dev.rungbook.io.Checkpoint;
import dev.rungbook.runner.JupyterExecution;
import dev.rungbook.runner.NotebookRunner;
import java.io.IOException;
import java.io.PrintStream;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.List;
import java.util.Optional;
import java.util.concurrent.Callable;
import java.util.stream.Collectors;
import java.util.stream.Stream;
import picocli.CommandLine.Command;
import picocli.CommandLine.Option;

/** {@code rungbook demo}: opens every sample checkpoint and prints a summary of each tensor. */
@Command(name = "demo", mixinStandardHelpOptions = true,
        description = {"Run the demo on the embedded sample checkpoints: inspect every sample tensor, install the",
            "kernel for the user, then execute notebooks 01 and 02 headless and write HTML reports: through Jupyter",
            "(nbclient) when Python has it, else with the embedded runner (no Jupyter needed).",
            "Run it from the repository root: the notebooks read sample-tensors/ from there."})
final class DemoCommand implements Callable<Integer> {
    @Option(names = "--samples", description = "Folder of sample checkpoints (default: ${DEFAULT-VALUE}).",
            defaultValue = "sample-tensors")
    Path samples;

    @Option(names = "--notebooks", description = "Folder of the notebooks (default: ${DEFAULT-VALUE}).",
            defaultValue = "notebooks")
    Path notebooks;

    @Option(names = "--out", paramLabel = "DIR",
            description = "Folder for the executed notebooks and HTML reports (default: ${DEFAULT-VALUE}).",
            defaultValue = "target/demo")
    Path out;

    @Option(names = "--no-notebooks", description = "Only inspect the sample tensors.")
    boolean noNotebooks;

    @Option(names = "--embedded", description = "Execute with the embedded runner even when Jupyter is present.")
    boolean embedded;

    @Option(names = "--kernel-prefix", paramLabel = "DIR",
            description = "Install the kernel spec under DIR/share/jupyter/kernels instead of the user's folder.")
    Path kernelPrefix;

    /** The notebooks the demo executes. */
    static final List<String> DEMO_NOTEBOOKS = List.of("01-first-look.ipynb", "02-granularity-and-range.ipynb");

    @Override
    public Integer call() throws Exception {
        int code = run(samples, System.out);
        if (code != 0 || noNotebooks) {
            return code;
        }
        RunCommand.Executor executor = null;
        if (!embedded) {
            executor = jupyter(kernelPrefix, System.out, System.err);
        }
        if (executor == null) {
            System.out.println();
            System.out.println("Executing with the embedded runner (no Jupyter needed) ...");
            executor = NotebookRunner.create()::execute;
        }
        return runNotebooks(notebooks, out, executor, System.out, System.err);
    }

    /**
     * Installs the kernel (for the user, or under {@code prefix}) and returns an executor that runs notebooks through
     * Jupyter, or null when Python lacks nbclient or the kernel cannot be installed (then the embedded runner is used).
     */
    static RunCommand.Executor jupyter(Path prefix, PrintStream out, PrintStream err) {
        Path kernels = prefix == null ? KernelSpec.userKernelsDir() : KernelSpec.prefixKernelsDir(prefix);
        out.println();
        try {
            Path dir = KernelSpec.installWithClassArchive(kernels, List.of(), m -> err.println("rungbook demo: " + m));
            out.println("Installed the Jupyter kernel \"" + KernelSpec.DISPLAY_NAME + "\" in " + dir.toAbsolutePath());
        } catch (IOException | RuntimeException e) {
            err.println("rungbook demo: cannot install the kernel in " + kernels + " (" + e + ")");
            return null;
        }
        Optional<JupyterExecution> jupyter = JupyterExecution.find(prefix == null ? null
                : prefix.resolve("share").resolve("jupyter"));
        if (jupyter.isEmpty()) {
            out.println("No Python with nbclient and nbformat found (" + String.join(", ", JupyterExecution.PYTHONS)
                    + "): using the embedded runner.");
            return null;
        }
        out.println("Executing through Jupyter (" + jupyter.get().python() + " with nbclient, kernel "
                + KernelSpec.NAME + ") ...");
        Path workDir = Path.of("").toAbsolutePath();
        return nb -> {
            try {
                return jupyter.get().execute(nb, workDir);
            } catch (IOException e) {
                err.println("rungbook demo: " + e.getMessage());
                err.println("rungbook demo: running " + nb.getFileName() + " with the embedded runner instead");
                return NotebookRunner.create().execute(nb);
            }
        };
    }

    /** Executes the demo notebooks of {@code folder}, writing notebooks and reports to {@code outDir}. */
    static int runNotebooks(Path folder, Path outDir, RunCommand.Executor executor, PrintStream out, PrintStream err)
            throws Exception {
        List<Path> files = DEMO_NOTEBOOKS.stream().map(folder::resolve).collect(Collectors.toList());
        for (Path f : files) {
            if (!Files.isRegularFile(f)) {
                err.println("rungbook demo: no notebook at " + f.toAbsolutePath() + " (run from the repository root)");
                return 1;
            }
        }
        int code = RunCommand.run(files, outDir, true, executor, out, err);
        out.println();
        out.println("HTML reports (open in a browser):");
        for (Path f : files) {
            String n = f.getFileName().toString();
            out.println("  " + outDir.resolve(n.substring(0, n.length() - ".ipynb".length()) + ".html").toAbsolutePath()
                    .normalize());
        }
        return code;
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

    static void inspect(Path file, PrintStream out) {
        try (Checkpoint c = Checkpoint.open(file)) {
            out.println();
            out.print(InspectCommand.describe(c));
        }
    }
}
