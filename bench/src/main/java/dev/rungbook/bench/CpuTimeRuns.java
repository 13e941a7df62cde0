package dev.rungbook.bench;

import java.io.IOException;
import java.net.URL;
import java.net.URLClassLoader;
import java.nio.charset.StandardCharsets;
import java.nio.file.Files;
import java.nio.file.Path;
import java.nio.file.StandardCopyOption;
import java.lang.management.ManagementFactory;
import java.lang.management.ThreadMXBean;
import java.util.ArrayList;
import java.util.Arrays;
import java.util.LinkedHashMap;
import java.util.List;
import java.util.Locale;
import java.util.Map;
import java.util.function.DoubleSupplier;
import java.util.regex.Matcher;
import java.util.regex.Pattern;

/** What the CPU-time harnesses ({@link QuantizeCpuTime}, {@link ForwardCpuTime}, {@link SegmentCpuTime}) share. */
final class CpuTimeRuns {
    private CpuTimeRuns() {
    }

    /** The first line of {@code /proc/loadavg}, or "n/a". */
    static String loadAverage() {
        try {
            return Files.readString(Path.of("/proc/loadavg")).strip();
        } catch (IOException e) {
            return "n/a";
        }
    }

    /** Whether the JVM runs with {@code --add-modules jdk.incubator.vector}. */
    static boolean vectorModule() {
        return ModuleLayer.boot().findModule("jdk.incubator.vector").isPresent();
    }

    /**
     * A class loader for an older library jar beside this benchmark jar: {@code dev.rungbook} classes come from the
     * older jar first (then the benchmark jar, for the subject class), everything else from {@code anchor}'s loader.
     *
     * @throws IllegalArgumentException if there is no file at {@code jar}
     */
    static ClassLoader olderLibrary(Path jar, Class<?> anchor) throws IOException {
        if (!Files.isRegularFile(jar)) {
            throw new IllegalArgumentException("--before: no jar at " + jar.toAbsolutePath());
        }
        URL bench = anchor.getProtectionDomain().getCodeSource().getLocation();
        return new ChildFirst(new URL[] {jar.toUri().toURL(), bench}, anchor.getClassLoader());
    }

    /**
     * Per-repetition times of interleaved bodies: {@code cpu[c][r]} and {@code wall[c][r]} in ms for body {@code c} in
     * repetition {@code r}; {@code sink} sums the bodies' results, so the JIT cannot drop their work.
     */
    record Timings(double[][] cpu, double[][] wall, double sink) {
        /** Body {@code c}'s thread-CPU times, ascending (median at {@code length / 2}, fastest at 0). */
        double[] sortedCpu(int c) {
            double[] t = cpu[c].clone();
            Arrays.sort(t);
            return t;
        }

        /** Body {@code c}'s wall-clock median. */
        double wallMedian(int c) {
            double[] w = wall[c].clone();
            Arrays.sort(w);
            return w[w.length / 2];
        }
    }

    /**
     * Runs every body once per round, in order, for {@code warm} rounds that are not kept and then {@code reps} rounds
     * that are: each body is timed by the calling thread's CPU time and by the wall clock.
     */
    static Timings interleaved(List<? extends DoubleSupplier> bodies, int warm, int reps) {
        ThreadMXBean bean = ManagementFactory.getThreadMXBean();
        double[][] cpu = new double[bodies.size()][reps];
        double[][] wall = new double[bodies.size()][reps];
        double sink = 0;
        for (int rep = 0; rep < warm + reps; rep++) {
            for (int c = 0; c < bodies.size(); c++) {
                long w0 = System.nanoTime();
                long t0 = bean.getCurrentThreadCpuTime();
                sink += bodies.get(c).getAsDouble();
                long t1 = bean.getCurrentThreadCpuTime();
                long w1 = System.nanoTime();
                if (rep >= warm) {
                    cpu[c][rep - warm] = (t1 - t0) / 1e6;
                    wall[c][rep - warm] = (w1 - w0) / 1e6;
                }
            }
        }
        return new Timings(cpu, wall, sink);
    }

    /** Writes JSON rows as an array, atomically (a temporary file in the target folder, then a move over it). */
    static void writeRows(Path target, List<String> rows) throws IOException {
        Path abs = target.toAbsolutePath();
        Path tmp = Files.createTempFile(abs.getParent(), abs.getFileName().toString(), ".tmp");
        Files.writeString(tmp, "[\n" + String.join(",\n", rows) + "\n]\n", StandardCharsets.UTF_8);
        Files.move(tmp, abs, StandardCopyOption.REPLACE_EXISTING, StandardCopyOption.ATOMIC_MOVE);
    }

    /**
     * System property: the number of fresh JVMs a CPU-time harness runs its cases in ({@link #inForks}); 1 or absent:
     * this JVM only.
     */
    static final String FORKS = "rungbook.bench.forks";

    /** One case's row as {@link QuantizeCpuTime} writes it: name, median, min, max, repetitions. */
    private static final Pattern ROW = Pattern.compile("\\{\"benchmark\": \"([^\"]+)\", \"mode\": \"[^\"]*\", "
            + "\"primaryMetric\": \\{\"score\": ([0-9.]+), \"scoreUnit\": \"ms/op\", \"min\": ([0-9.]+), "
            + "\"max\": ([0-9.]+), \"repetitions\": ([0-9]+)");

    /**
     * The number of forks {@link #FORKS} asks for (at least 1).
     *
     * @throws IllegalArgumentException if the property is not a positive integer
     */
    static int forks() {
        String v = System.getProperty(FORKS, "1");
        try {
            int n = Integer.parseInt(v.strip());
            if (n >= 1) {
                return n;
            }
        } catch (NumberFormatException e) {
            // refused below
        }
        throw new IllegalArgumentException(FORKS + " must be a positive integer, got '" + v + "'");
    }

    /**
     * Runs {@code harness}'s {@code main} in {@code forks} fresh JVMs one after the other (this JVM's options and
     * class path; each fork's output files, the arguments at {@code outputArgs} that are present, go to a temporary
     * folder), then writes to each output file one row per case: the median of the forks' medians as the score, the
     * smallest and largest repetition over all forks as min and max, every fork's median under {@code forkMedians}.
     * A JVM's compiled code is not the same from one start to the next (inlining and loop decisions follow the
     * profile, and code placement differs), and on this project's machines a memory-bound kernel's median moved by up
     * to 1.8x between JVMs running the same jar (2026-12-03, fused NF4 35-64 ms): one JVM's figure is one draw of
     * that, as JMH's forks say for its own scores.
     *
     * @throws IOException if a fork fails or its output cannot be read, or an output cannot be written
     */
    static void inForks(Class<?> harness, String[] args, int forks, int... outputArgs)
            throws IOException, InterruptedException {
        Path dir = Files.createTempDirectory("rungbook-forks");
        try {
            List<List<String>> forkOutputs = new ArrayList<>();
            for (int f = 0; f < forks; f++) {
                String[] a = args.clone();
                List<String> outputs = new ArrayList<>();
                for (int i : outputArgs) {
                    if (i < a.length) {
                        a[i] = dir.resolve("fork" + f + "-" + i + ".json").toString();
                        outputs.add(a[i]);
                    }
                }
                forkOutputs.add(outputs);
                List<String> command = new ArrayList<>();
                command.add(Path.of(System.getProperty("java.home"), "bin", "java").toString());
                for (String o : ManagementFactory.getRuntimeMXBean().getInputArguments()) {
                    if (!o.startsWith("-D" + FORKS + "=")) {
                        command.add(o);
                    }
                }
                command.addAll(List.of("-D" + FORKS + "=1", "-cp", System.getProperty("java.class.path"),
                        harness.getName()));
                command.addAll(Arrays.asList(a));
                System.out.printf("fork %d of %d (load average %s)%n", f + 1, forks, loadAverage());
                System.out.flush();
                int rc = new ProcessBuilder(command).inheritIO().start().waitFor();
                if (rc != 0) {
                    throw new IOException(harness.getSimpleName() + " fork " + (f + 1) + " of " + forks
                            + " exited with status " + rc);
                }
            }
            int k = 0;
            for (int i : outputArgs) {
                if (i < args.length) {
                    List<List<String>> files = new ArrayList<>();
                    for (List<String> outputs : forkOutputs) {
                        files.add(Files.readAllLines(Path.of(outputs.get(k)), StandardCharsets.UTF_8));
                    }
                    writeRows(Path.of(args[i]), mergeForks(files));
                    k++;
                }
            }
        } finally {
            try (var s = Files.list(dir)) {
                for (Path p : s.toList()) {
                    Files.deleteIfExists(p);
                }
            }
            Files.deleteIfExists(dir);
        }
    }

    /**
     * The rows of several forks' files (each the lines of one file, rows as {@link QuantizeCpuTime} writes them) as
     * one row per case, in the first file's order (see {@link #inForks}).
     *
     * @throws IOException if a file holds no row, or the forks do not hold the same cases
     */
    static List<String> mergeForks(List<List<String>> files) throws IOException {
        Map<String, List<double[]>> byCase = new LinkedHashMap<>();
        for (List<String> lines : files) {
            int rows = 0;
            for (String line : lines) {
                Matcher m = ROW.matcher(line);
                if (m.find()) {
                    byCase.computeIfAbsent(m.group(1), x -> new ArrayList<>()).add(new double[] {
                        Double.parseDouble(m.group(2)), Double.parseDouble(m.group(3)),
                        Double.parseDouble(m.group(4)), Double.parseDouble(m.group(5))});
                    rows++;
                }
            }
            if (rows == 0) {
                throw new IOException("a fork wrote no result row");
            }
        }
        List<String> merged = new ArrayList<>();
        for (Map.Entry<String, List<double[]>> e : byCase.entrySet()) {
            List<double[]> r = e.getValue();
            if (r.size() != files.size()) {
                throw new IOException(e.getKey() + ": in " + r.size() + " of " + files.size() + " forks");
            }
            double[] medians = r.stream().mapToDouble(x -> x[0]).sorted().toArray();
            int n = medians.length;
            double median = n % 2 == 1 ? medians[n / 2] : (medians[n / 2 - 1] + medians[n / 2]) / 2;
            StringBuilder each = new StringBuilder();
            for (double[] x : r) {
                each.append(each.length() == 0 ? "" : ", ").append(String.format(Locale.ROOT, "%.3f", x[0]));
            }
            merged.add(String.format(Locale.ROOT, "{\"benchmark\": \"%s\", \"mode\": \"cpu-time median of %d forks' "
                    + "medians\", \"primaryMetric\": {\"score\": %.3f, \"scoreUnit\": \"ms/op\", \"min\": %.3f, "
                    + "\"max\": %.3f, \"repetitions\": %d, \"forks\": %d, \"forkMedians\": [%s]}}", e.getKey(), n,
                    median, r.stream().mapToDouble(x -> x[1]).min().orElseThrow(),
                    r.stream().mapToDouble(x -> x[2]).max().orElseThrow(),
                    (long) r.stream().mapToDouble(x -> x[3]).sum(), n, each));
        }
        return merged;
    }

    /** Loads {@code dev.rungbook} classes from its own URLs first, everything else from the parent. */
    private static final class ChildFirst extends URLClassLoader {
        ChildFirst(URL[] urls, ClassLoader parent) {
            super(urls, parent);
        }

        @Override
        protected Class<?> loadClass(String name, boolean resolve) throws ClassNotFoundException {
            if (!name.startsWith("dev.rungbook.")) {
                return super.loadClass(name, resolve);
            }
            synchronized (getClassLoadingLock(name)) {
                Class<?> c = findLoadedClass(name);
                if (c == null) {
                    c = findClass(name);
                }
                if (resolve) {
                    resolveClass(c);
                }
                return c;
            }
        }
    }
}
