package dev.rungbook.cli;

import java.nio.file.Path;
import java.util.concurrent.Callable;
import picocli.CommandLine.Command;
import picocli.CommandLine.Option;

/** {@code rungbook demo}: inspects the sample checkpoints (more demo steps come with the kernel and notebooks). */
@Command(name = "demo", mixinStandardHelpOptions = true,
        description = "Run the demo on the embedded sample checkpoints.")
final class DemoCommand implements Callable<Integer> {
    @Option(names = "--samples", description = "Folder of sample checkpoints (default: ${DEFAULT-VALUE}).",
            defaultValue = "sample-tensors")
    Path samples;

    @Override
    public Integer call() {
        System.out.println("Rungbook demo: sample folder " + samples.toAbsolutePath().normalize());
        return 0;
    }
}
