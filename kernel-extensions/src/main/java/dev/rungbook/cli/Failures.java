package dev.rungbook.cli;

import dev.rungbook.io.CheckpointFormatException;
import dev.rungbook.progress.OperationInterruptedException;
import java.io.IOException;
import java.io.PrintWriter;
import java.io.UncheckedIOException;
import java.util.concurrent.Callable;

/** Turns the expected failures of the batch commands into one line on standard error and exit code 1. */
final class Failures {
    private Failures() {
    }

    /** Runs {@code body}; a bad file, bad argument value or I/O failure prints {@code rungbook CMD: message}, gives 1. */
    static int guard(String command, PrintWriter err, Callable<Integer> body) throws Exception {
        try {
            return body.call();
        } catch (CheckpointFormatException | UncheckedIOException | IllegalArgumentException | IllegalStateException
                | OperationInterruptedException | IOException e) {
            err.println("rungbook " + command + ": " + e.getMessage());
            err.flush();
            return 1;
        }
    }
}
