package dev.rungbook.testing;

import java.io.IOException;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.List;
import java.util.Random;
import java.util.concurrent.TimeUnit;

/** Shared test helpers: seeded data, named tolerances, and the optional NumPy reference. */
public final class Fixtures {
    /** Tolerance for values printed to four significant digits in a published table. */
    public static final double TABLE_4_DIGITS = 1e-3;
    /** Tolerance for float32 arithmetic on values near 1. */
    public static final double FLOAT_EPS = 1e-6;

    private Fixtures() {
    }

    /** A seeded random source; every test that draws numbers uses one so that failures reproduce. */
    public static Random random(long seed) {
        return new Random(seed);
    }

    /** {@code n} seeded standard normal values. */
    public static float[] gaussian(long seed, int n) {
        Random r = random(seed);
        float[] v = new float[n];
        for (int i = 0; i < n; i++) {
            v[i] = (float) r.nextGaussian();
        }
        return v;
    }

    /**
     * The python3 on PATH if it can import numpy, else {@code null}; tests that cross-check against NumPy skip
     * themselves (with an assumption) when it is absent.
     */
    public static String pythonWithNumpy() {
        for (String py : List.of("python3", "/usr/bin/python3")) {
            try {
                Process p = new ProcessBuilder(py, "-c", "import numpy").redirectErrorStream(true).start();
                p.getInputStream().readAllBytes();
                if (p.waitFor(60, TimeUnit.SECONDS) && p.exitValue() == 0) {
                    return py;
                }
            } catch (IOException e) {
                // try the next one
            } catch (InterruptedException e) {
                Thread.currentThread().interrupt();
                return null;
            }
        }
        return null;
    }

    /** Runs {@code python -c script args...} and fails the test with its output if it exits non-zero. */
    public static String runPython(String python, String script, String... args) throws IOException {
        List<String> cmd = new java.util.ArrayList<>(List.of(python, "-c", script));
        cmd.addAll(List.of(args));
        Process p = new ProcessBuilder(cmd).redirectErrorStream(true).start();
        String out = new String(p.getInputStream().readAllBytes(), java.nio.charset.StandardCharsets.UTF_8);
        try {
            if (!p.waitFor(120, TimeUnit.SECONDS) || p.exitValue() != 0) {
                throw new AssertionError("python failed: " + out);
            }
        } catch (InterruptedException e) {
            Thread.currentThread().interrupt();
            throw new AssertionError("interrupted", e);
        }
        return out;
    }

    /** A fresh temporary folder under the build's target directory. */
    public static Path tempDir(String prefix) throws IOException {
        Path base = Path.of("target", "test-tmp");
        Files.createDirectories(base);
        return Files.createTempDirectory(base, prefix);
    }
}
