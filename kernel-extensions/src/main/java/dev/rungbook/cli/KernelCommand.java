package dev.rungbook.cli;

import dev.rungbook.install.KernelSpec;
import dev.rungbook.kernel.KernelServer;
import java.nio.file.Path;
import java.util.ArrayList;
import java.util.List;
import java.util.concurrent.Callable;
import picocli.CommandLine.ArgGroup;
import picocli.CommandLine.Command;
import picocli.CommandLine.Option;
import picocli.CommandLine.Parameters;

/** {@code rungbook kernel install|remove|run}: the Jupyter kernel. */
@Command(name = "kernel", mixinStandardHelpOptions = true,
        description = "Install, remove or run the Rungbook Jupyter kernel.",
        subcommands = {KernelCommand.Install.class, KernelCommand.Remove.class, KernelCommand.Run.class,
                KernelCommand.WarmUp.class})
final class KernelCommand implements Callable<Integer> {
    @Override
    public Integer call() {
        new picocli.CommandLine(this).usage(System.out);
        return 2;
    }

    static int fail(String message) {
        System.err.println("rungbook kernel: " + message);
        return 1;
    }

    /** Where a kernel spec goes: the user's Jupyter folder (default) or an installation prefix. */
    static final class Place {
        @Option(names = "--user", description = "The current user's Jupyter data folder (the default).")
        boolean user;

        @Option(names = "--prefix", paramLabel = "DIR",
                description = "An installation prefix: the spec goes to DIR/share/jupyter/kernels.")
        Path prefix;

        static Path kernelsDir(Place p) {
            return p == null || p.prefix == null ? KernelSpec.userKernelsDir() : KernelSpec.prefixKernelsDir(p.prefix);
        }
    }

    @Command(name = "install", mixinStandardHelpOptions = true,
            description = "Write the kernel spec '" + KernelSpec.NAME + "' (\"" + KernelSpec.DISPLAY_NAME + "\").")
    static final class Install implements Callable<Integer> {
        @ArgGroup(exclusive = true)
        Place place;

        @Option(names = "--jvm-opt", paramLabel = "OPTION",
                description = "A JVM option for the kernel, e.g. --jvm-opt -Xmx4g (repeatable).")
        List<String> jvmOptions = new ArrayList<>();

        @Option(names = "--no-class-archive",
                description = "Do not make the class-data archive that speeds up kernel start (a training run of a "
                        + "few seconds at install time).")
        boolean noArchive;

        @Override
        public Integer call() {
            Path kernels = Place.kernelsDir(place);
            try {
                Path dir = noArchive ? KernelSpec.install(kernels, KernelSpec.argv(jvmOptions))
                        : KernelSpec.installWithClassArchive(kernels, jvmOptions,
                                m -> System.err.println("rungbook kernel: " + m));
                System.out.println("Installed kernel spec " + KernelSpec.NAME + " in " + dir);
                return 0;
            } catch (java.io.IOException | RuntimeException e) {
                return fail("cannot install the kernel spec in " + kernels + ": " + e);
            }
        }
    }

    @Command(name = "remove", mixinStandardHelpOptions = true, description = "Remove the kernel spec.")
    static final class Remove implements Callable<Integer> {
        @ArgGroup(exclusive = true)
        Place place;

        @Override
        public Integer call() throws Exception {
            Path dir = Place.kernelsDir(place);
            if (KernelSpec.remove(dir)) {
                System.out.println("Removed kernel spec " + KernelSpec.NAME + " from " + dir);
                return 0;
            }
            System.err.println("No kernel spec " + KernelSpec.NAME + " in " + dir);
            return 1;
        }
    }

    /** The training run behind the class-data archive: not for users, so hidden from the help. */
    @Command(name = "warm-up", hidden = true, description = "Run typical first cells once and exit.")
    static final class WarmUp implements Callable<Integer> {
        @Override
        public Integer call() {
            System.out.println("warm-up: " + dev.rungbook.kernel.KernelServer.warmUp() + " cells");
            return 0;
        }
    }

    @Command(name = "run", mixinStandardHelpOptions = true,
            description = "Run the kernel for a Jupyter connection file (what the kernel spec launches).")
    static final class Run implements Callable<Integer> {
        @Parameters(paramLabel = "CONNECTION_FILE", description = "The connection file Jupyter wrote.")
        Path connectionFile;

        @Override
        public Integer call() {
            try {
                return KernelServer.serve(connectionFile);
            } catch (java.nio.file.NoSuchFileException e) {
                return fail("connection file " + connectionFile + " does not exist");
            } catch (java.io.IOException | IllegalArgumentException e) {
                return fail(e.getMessage());
            }
        }
    }
}
