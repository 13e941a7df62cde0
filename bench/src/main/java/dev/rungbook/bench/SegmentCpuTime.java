package dev.rungbook.bench;

import java.nio.file.Path;
import java.util.ArrayList;
import java.util.Arrays;
import java.util.List;
import java.util.Locale;
import java.util.function.DoubleSupplier;
import java.util.function.Function;

/**
 * {@code apply} of per-group int4 and NF4 on a 4096 x 4096 matrix ({@link SegmentSubject}) timed by the benchmark
 * thread's CPU time, interleaved (each repetition runs every case once in turn; the first {@code WARM} are dropped;
 * median and minimum of the rest), next to one plain copy of the matrix. With {@code --before OLD.jar} the same
 * cases of an older library version run in the same JVM (a class loader takes every {@code dev.rungbook} class from
 * {@code OLD.jar}, then from the benchmark jar for {@link SegmentSubject}); their names end in {@code Before}.
 *
 * <p>Output in JMH's JSON layout (score = median thread-CPU ms per call, mode {@code "cpu-time median"}), with the
 * minimum, the wall-clock median and the load average before and after.
 *
 * <p>Usage: {@code java -Xmx6g [--add-modules jdk.incubator.vector] -cp bench/target/benchmarks.jar
 * dev.rungbook.bench.SegmentCpuTime OUT.json [--before OLD.jar] [--reps N]}.
 */
public final class SegmentCpuTime {
    private static final int WARM = 4;

    private SegmentCpuTime() {
    }

    private record Case(String name, DoubleSupplier body) {
    }

    @SuppressWarnings("unchecked")
    private static void add(List<Case> cases, Object subject, String suffix) throws ReflectiveOperationException {
        Function<String, DoubleSupplier> f = (Function<String, DoubleSupplier>) subject;
        for (String name : (Iterable<String>) subject.getClass().getMethod("names").invoke(subject)) {
            cases.add(new Case(name + suffix, f.apply(name)));
        }
    }

    public static void main(String[] args) throws Exception {
        if (args.length < 1) {
            System.err.println("usage: SegmentCpuTime OUT.json [--before OLD.jar] [--reps N]");
            System.exit(2);
        }
        Path outFile = Path.of(args[0]).toAbsolutePath();
        Path before = null;
        int reps = 15;
        for (int i = 1; i < args.length; i++) {
            if (args[i].equals("--before")) {
                before = Path.of(args[++i]);
            } else if (args[i].equals("--reps")) {
                reps = Integer.parseInt(args[++i]);
            } else {
                throw new IllegalArgumentException("unknown argument " + args[i]);
            }
        }
        String loadStart = CpuTimeRuns.loadAverage();
        List<Case> cases = new ArrayList<>();
        float[] src = new float[4096 * 4096];
        float[] copy = new float[src.length];
        Arrays.fill(src, 1.5f);
        cases.add(new Case("plainCopy", () -> {
            System.arraycopy(src, 0, copy, 0, src.length);
            return copy[copy.length - 1];
        }));
        add(cases, new SegmentSubject(), "");
        if (before != null) {
            ClassLoader old = CpuTimeRuns.olderLibrary(before, SegmentCpuTime.class);
            Object subject = old.loadClass(SegmentSubject.class.getName()).getConstructor().newInstance();
            if (subject.getClass().getClassLoader() != old) {
                throw new IllegalStateException("the older library's subject was not loaded from " + before);
            }
            add(cases, subject, "Before");
        }
        CpuTimeRuns.Timings times = CpuTimeRuns.interleaved(cases.stream().map(Case::body).toList(), WARM, reps);
        String loadEnd = CpuTimeRuns.loadAverage();
        List<String> rows = new ArrayList<>();
        for (int c = 0; c < cases.size(); c++) {
            double[] t = times.sortedCpu(c);
            double wallMedian = times.wallMedian(c);
            Case k = cases.get(c);
            double median = t[t.length / 2];
            System.out.printf(Locale.ROOT, "%-32s cpu median %8.2f ms, min %8.2f; wall median %8.2f%n", k.name(),
                    median, t[0], wallMedian);
            rows.add(String.format(Locale.ROOT, "{\"benchmark\": \"dev.rungbook.bench.SegmentCpuTime.%s\", "
                    + "\"mode\": \"cpu-time median\", \"threads\": 1, \"primaryMetric\": {\"score\": %.3f, "
                    + "\"scoreUnit\": \"ms/op\", \"min\": %.3f, \"wallMedian\": %.3f, \"repetitions\": %d}, "
                    + "\"loadStart\": \"%s\", \"loadEnd\": \"%s\", \"vectorModule\": %b, \"before\": \"%s\"}",
                    k.name(), median, t[0], wallMedian, reps, loadStart, loadEnd, CpuTimeRuns.vectorModule(),
                    before == null ? "" : before.getFileName()));
        }
        System.out.println("(checksum " + times.sink() + "; load " + loadStart + " -> " + loadEnd + "; vector module "
                + CpuTimeRuns.vectorModule() + ")");
        CpuTimeRuns.writeRows(outFile, rows);
    }
}
