package dev.rungbook.cli;

import java.util.concurrent.Callable;
import picocli.CommandLine;
import picocli.CommandLine.Command;

/** The {@code rungbook} command line: {@code java -jar rungbook-all.jar COMMAND ...}. */
@Command(name = "rungbook", mixinStandardHelpOptions = true, version = "rungbook 0.1.0",
        description = "Quantization experiments for Java: a Jupyter kernel, notebooks and a batch command line.",
        subcommands = {DemoCommand.class, SamplesCommand.class, KernelCommand.class, RunCommand.class,
            InspectCommand.class, QuantizeCommand.class, StudyCommand.class, PlanCommand.class})
public final class Main implements Callable<Integer> {
    /** Runs the command line and exits with its code (0 ok, 1 failure, 2 usage error). */
    public static void main(String[] args) {
        System.exit(run(args));
    }

    /** Runs the command line and returns its exit code. */
    public static int run(String... args) {
        return commandLine().execute(args);
    }

    /**
     * The configured command line. A usage error prints its message and a pointer to {@code --help} (not the whole
     * usage, which would bury a message such as the bad token of a spec) and exits with 2.
     */
    static CommandLine commandLine() {
        CommandLine cl = new CommandLine(new Main());
        cl.setParameterExceptionHandler((ex, args) -> {
            CommandLine c = ex.getCommandLine();
            c.getErr().println(c.getColorScheme().errorText(ex.getMessage()));
            c.getErr().println("Try '" + c.getCommandSpec().qualifiedName() + " --help' for the options.");
            c.getErr().flush();
            return c.getCommandSpec().exitCodeOnInvalidInput();
        });
        return cl;
    }

    @Override
    public Integer call() {
        new CommandLine(this).usage(System.out);
        return 2;
    }
}
