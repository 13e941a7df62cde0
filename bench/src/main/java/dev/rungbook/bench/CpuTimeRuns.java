package dev.rungbook.bench;

import java.io.IOException;
import java.net.URL;
import java.net.URLClassLoader;
import java.nio.charset.StandardCharsets;
import java.nio.file.Files;
import java.nio.file.Path;
import java.nio.file.StandardCopyOption;
import java.util.List;

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
