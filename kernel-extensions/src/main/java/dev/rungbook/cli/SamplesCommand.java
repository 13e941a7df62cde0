package dev.rungbook.cli;

import dev.rungbook.samples.SampleGenerator;
import java.nio.file.Path;
import java.util.concurrent.Callable;
import picocli.CommandLine.Command;
import picocli.CommandLine.Option;

/** {@code rungbook samples}: regenerates the sample checkpoints and data sets from their seeds. */
@Command(name = "samples", mixinStandardHelpOptions = true,
        description = {"Regenerate the sample checkpoints and data sets (simulated conveyor and solar-farm scenarios)",
            "from seeds; or, with --large, write a large synthetic bf16 checkpoint for scale demos."})
final class SamplesCommand implements Callable<Integer> {
    @Option(names = "--out", description = "Target folder (default: ${DEFAULT-VALUE}).", defaultValue = "sample-tensors")
    Path out;

    @Option(names = "--large", paramLabel = "SIZE",
            description = {"Instead: write OUT/large/synthetic-SIZE.bf16.safetensors of about SIZE (e.g. 1GiB, 2GiB,",
                "512MiB): heavy-tailed weights with outlier columns, seeded; never committed (ignored by git)."})
    String large;

    @Option(names = "--seed", description = "Seed of the large checkpoint (default: ${DEFAULT-VALUE}).",
            defaultValue = "1")
    long seed;

    @Override
    public Integer call() throws Exception {
        if (large != null) {
            long bytes;
            try {
                bytes = dev.rungbook.plan.BitBudget.parseBytes(large);
            } catch (IllegalArgumentException e) {
                System.err.println("rungbook samples: --large " + e.getMessage());
                return 2;
            }
            Path dir = java.nio.file.Files.createDirectories(out.resolve("large"));
            Path file = dir.resolve("synthetic-" + large.replace(" ", "") + ".bf16.safetensors");
            var written = dev.rungbook.samples.LargeCheckpoint.write(file, bytes, seed, TerminalProgress.toStderr());
            System.out.println("wrote " + written.size() + " tensors (" + java.nio.file.Files.size(file)
                    + " bytes) to " + file.toAbsolutePath().normalize());
            return 0;
        }
        SampleGenerator.Summary s = SampleGenerator.generate(out, TerminalProgress.toStderr(), System.out);
        System.out.println("wrote samples to " + s.folder().toAbsolutePath().normalize());
        return 0;
    }
}
