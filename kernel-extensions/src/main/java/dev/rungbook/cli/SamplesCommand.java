package dev.rungbook.cli;

import dev.rungbook.samples.SampleGenerator;
import java.nio.file.Path;
import java.util.concurrent.Callable;
import picocli.CommandLine.Command;
import picocli.CommandLine.Option;

/** {@code rungbook samples}: regenerates the sample checkpoints and data sets from their seeds. */
@Command(name = "samples", mixinStandardHelpOptions = true,
        description = "Regenerate the sample checkpoints and data sets (simulated conveyor scenario) from seeds.")
final class SamplesCommand implements Callable<Integer> {
    @Option(names = "--out", description = "Target folder (default: ${DEFAULT-VALUE}).", defaultValue = "sample-tensors")
    Path out;

    @Override
    public Integer call() throws Exception {
        SampleGenerator.Summary s = SampleGenerator.generate(out, TerminalProgress.toStderr(), System.out);
        System.out.println("wrote samples to " + s.folder().toAbsolutePath().normalize());
        return 0;
    }
}
