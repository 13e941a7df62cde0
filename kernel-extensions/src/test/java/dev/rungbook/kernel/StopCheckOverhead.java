package dev.rungbook.kernel;

import java.io.IOException;
import java.nio.charset.StandardCharsets;
import java.nio.file.Files;
import java.nio.file.Path;
import java.nio.file.StandardCopyOption;
import java.util.ArrayList;
import java.util.Arrays;
import java.util.List;
import java.util.Locale;

/**
 * What the stop checks cost cell code: the same cell methods in two sessions of one JVM, one with the checks and one
 * started with {@code -Drungbook.stopChecks=false}, timed in thread CPU time inside the cell method (the cell's own
 * thread), in interleaved repetitions after a warm-up. Not a unit test (no timing in unit tests); run by hand:
 * {@code java -cp <test class path> dev.rungbook.kernel.StopCheckOverhead bench/results/stopcheck-overhead-jdkN.md}.
 */
public final class StopCheckOverhead {
    private static final int WARM_UP = 3;
    private static final int REPETITIONS = 9;

    private StopCheckOverhead() {
    }

    /** One workload: a cell method that returns the thread CPU nanoseconds of its work, and the cell calling it. */
    private record Workload(String label, String method, String call) {
    }

    private static final List<Workload> WORKLOADS = List.of(
            new Workload("simple loop, 10^9 iterations",
                    "long loopTime(long n) { var mx = java.lang.management.ManagementFactory.getThreadMXBean();"
                            + " long t0 = mx.getCurrentThreadCpuTime(); long s = 0;"
                            + " for (long i = 0; i < n; i++) { s += i ^ (i >>> 3); } sink = s;"
                            + " return mx.getCurrentThreadCpuTime() - t0; }",
                    "loopTime(1_000_000_000L)"),
            new Workload("nested loops, 220x220 matrix product x16",
                    "long matTime(int n) { var mx = java.lang.management.ManagementFactory.getThreadMXBean();"
                            + " double[] a = new double[n * n], b = new double[n * n], c = new double[n * n];"
                            + " for (int i = 0; i < n * n; i++) { a[i] = i % 7; b[i] = i % 5; }"
                            + " long t0 = mx.getCurrentThreadCpuTime();"
                            + " for (int r = 0; r < 16; r++) for (int i = 0; i < n; i++) for (int k = 0; k < n; k++) {"
                            + " double x = a[i * n + k]; for (int j = 0; j < n; j++) c[i * n + j] += x * b[k * n + j]; }"
                            + " sink = (long) c[n + 1]; return mx.getCurrentThreadCpuTime() - t0; }",
                    "matTime(220)"),
            new Workload("recursion, fib(36)",
                    "long fib(int n) { return n < 2 ? n : fib(n - 1) + fib(n - 2); }\n"
                            + "long fibTime(int n) { var mx = java.lang.management.ManagementFactory.getThreadMXBean();"
                            + " long t0 = mx.getCurrentThreadCpuTime(); sink = fib(n);"
                            + " return mx.getCurrentThreadCpuTime() - t0; }",
                    "fibTime(36)"));

    /**
     * Runs the comparison and writes a Markdown table.
     *
     * @param args the output file
     */
    public static void main(String[] args) throws IOException {
        if (args.length != 1) {
            throw new IllegalArgumentException("usage: StopCheckOverhead OUTPUT.md");
        }
        CellEvaluator with = session(true);
        CellEvaluator without = session(false);
        List<String> rows = new ArrayList<>();
        for (Workload w : WORKLOADS) {
            for (CellEvaluator ev : List.of(with, without)) {
                expectNoValue(ev.eval(w.method(), 1), w.method());
            }
            for (int i = 0; i < WARM_UP; i++) {
                time(with, w);
                time(without, w);
            }
            long[] on = new long[REPETITIONS];
            long[] off = new long[REPETITIONS];
            for (int i = 0; i < REPETITIONS; i++) {
                // Interleaved, alternating which goes first.
                if (i % 2 == 0) {
                    on[i] = time(with, w);
                    off[i] = time(without, w);
                } else {
                    off[i] = time(without, w);
                    on[i] = time(with, w);
                }
            }
            double mOn = median(on) / 1e6;
            double mOff = median(off) / 1e6;
            rows.add(String.format(Locale.ROOT, "| %s | %.1f ms | %.1f ms | %.2f |", w.label(), mOff, mOn, mOn / mOff));
            System.out.println(rows.get(rows.size() - 1));
        }
        with.close();
        without.close();
        StringBuilder md = new StringBuilder();
        md.append("# Cost of the kernel's stop checks on cell code\n\n");
        md.append("`kernel-extensions/src/test/java/dev/rungbook/kernel/StopCheckOverhead.java`, ")
                .append(System.getProperty("java.vm.name")).append(' ').append(System.getProperty("java.version"))
                .append(", ").append(Runtime.getRuntime().availableProcessors()).append(" cores. ")
                .append("Thread CPU time of the cell method, median of ").append(REPETITIONS)
                .append(" interleaved repetitions after ").append(WARM_UP).append(" warm-ups; both sessions in one JVM.")
                .append(" 'checks off': a session started with -Drungbook.stopChecks=false; on a JDK whose JShell")
                .append(" compiles its own stop checks into cells (25 does, 17 does not) it still has those.")
                .append(" Load average at the end: ").append(loadAverage()).append(".\n\n");
        md.append("| cell work | checks off | checks on | on / off |\n| --- | ---: | ---: | ---: |\n");
        rows.forEach(r -> md.append(r).append('\n'));
        Path out = Path.of(args[0]);
        Path tmp = out.resolveSibling(out.getFileName() + ".tmp");
        Files.writeString(tmp, md.toString(), StandardCharsets.UTF_8);
        Files.move(tmp, out, StandardCopyOption.REPLACE_EXISTING, StandardCopyOption.ATOMIC_MOVE);
        System.out.print(md);
    }

    private static CellEvaluator session(boolean checks) {
        String before = System.getProperty(ValueCapturingExecutionControl.STOP_CHECKS_PROPERTY);
        System.setProperty(ValueCapturingExecutionControl.STOP_CHECKS_PROPERTY, Boolean.toString(checks));
        try {
            CellEvaluator ev = CellEvaluator.create(System.getProperty("java.class.path"), List.of(), null);
            expectNoValue(ev.eval("long sink = 0;", 0), "sink");
            if (ev.stopChecksOn() != checks) {
                throw new IllegalStateException("stop checks " + (checks ? "did not turn on" : "did not turn off"));
            }
            return ev;
        } finally {
            if (before == null) {
                System.clearProperty(ValueCapturingExecutionControl.STOP_CHECKS_PROPERTY);
            } else {
                System.setProperty(ValueCapturingExecutionControl.STOP_CHECKS_PROPERTY, before);
            }
        }
    }

    private static long time(CellEvaluator ev, Workload w) {
        CellResult r = ev.eval(w.call(), 2);
        if (r instanceof CellResult.Success s && s.value().orElse(null) instanceof Long nanos) {
            return nanos;
        }
        throw new IllegalStateException(w.call() + " gave " + r);
    }

    private static void expectNoValue(CellResult r, String what) {
        if (!(r instanceof CellResult.Success)) {
            throw new IllegalStateException(what + " gave " + r);
        }
    }

    private static double median(long[] v) {
        long[] s = v.clone();
        Arrays.sort(s);
        return s.length % 2 == 1 ? s[s.length / 2] : (s[s.length / 2 - 1] + s[s.length / 2]) / 2.0;
    }

    private static String loadAverage() {
        return String.format(Locale.ROOT, "%.2f",
                java.lang.management.ManagementFactory.getOperatingSystemMXBean().getSystemLoadAverage());
    }
}
