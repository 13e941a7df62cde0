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
import java.util.Arrays;
import java.util.List;
import java.util.function.DoubleSupplier;

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
