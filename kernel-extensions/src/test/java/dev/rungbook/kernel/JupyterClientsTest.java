package dev.rungbook.kernel;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertTrue;
import static org.junit.jupiter.api.Assumptions.assumeTrue;

import dev.rungbook.install.KernelSpec;
import dev.rungbook.testing.Fixtures;
import java.io.IOException;
import java.nio.charset.StandardCharsets;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.List;
import java.util.concurrent.TimeUnit;
import org.junit.jupiter.api.BeforeAll;
import org.junit.jupiter.api.Test;

/**
 * The kernel through real Jupyter clients (Debian's /usr/bin/python3 with jupyter_client, nbclient, nbformat and
 * jupyter_kernel_test; skipped when they are missing). The kernel spec is installed into a temporary prefix and runs
 * this build's classes from the test class path.
 */
class JupyterClientsTest {
    private static final String PYTHON = "/usr/bin/python3";
    private static Path jupyterPath;

    @BeforeAll
    static void installSpec() throws Exception {
        assumeTrue(hasJupyterClients(), PYTHON + " with jupyter_client, nbclient, nbformat and jupyter_kernel_test "
                + "is not available; kernel integration tests skipped");
        Path prefix = Fixtures.tempDir("kernel-spec").toAbsolutePath();
        Path spec = KernelSpec.install(KernelSpec.prefixKernelsDir(prefix), KernelSpec.argv(List.of("-Xmx512m")));
        assertTrue(Files.isRegularFile(spec.resolve("kernel.json")));
        jupyterPath = prefix.resolve("share").resolve("jupyter");
    }

    @Test
    void passesJupyterKernelConformanceSuite() throws Exception {
        String out = runScript("conformance.py");
        // Source: jupyter_kernel_test.KernelTests (the Jupyter project's conformance suite), 12 test methods.
        assertTrue(out.contains("Ran 12 tests"), out);
        assertTrue(out.strip().endsWith("OK"), out);
    }

    @Test
    void survivesFloodsBadSignaturesErrorsAndInterrupts() throws Exception {
        String out = runScript("protocol_checks.py");
        // the PASS/FAIL lines feed docs/make_reliability.py (kernel faults survived)
        Files.writeString(Path.of("target", "kernel-faults.txt"), out, StandardCharsets.UTF_8);
        assertTrue(out.contains("0 failure(s)"), out);
        assertTrue(out.contains("dropped a message with a bad or missing HMAC signature"), out);
        assertTrue(out.contains("dropped an unreadable message"), out);
    }

    @Test
    void notebookOutputsHaveTheExpectedMimeTypes() throws Exception {
        String out = runScript("notebook_check.py");
        assertTrue(out.contains("0 failure(s)"), out);
        assertEquals(7, out.lines().filter(l -> l.startsWith("PASS ")).count(), out);
    }

    private static String runScript(String name) throws IOException, InterruptedException {
        Path script = Path.of("src", "test", "python", name).toAbsolutePath();
        ProcessBuilder pb = new ProcessBuilder(PYTHON, script.toString()).redirectErrorStream(true);
        pb.environment().put("JUPYTER_PATH", jupyterPath.toString());
        pb.environment().put("JUPYTER_PLATFORM_DIRS", "1");
        Process p = pb.start();
        byte[] bytes = p.getInputStream().readAllBytes();
        if (!p.waitFor(600, TimeUnit.SECONDS)) {
            p.destroyForcibly();
        }
        String out = new String(bytes, StandardCharsets.UTF_8);
        assertEquals(0, p.exitValue(), out);
        return out;
    }

    private static boolean hasJupyterClients() {
        try {
            Process p = new ProcessBuilder(PYTHON, "-c", "import jupyter_client, nbclient, nbformat, jupyter_kernel_test")
                    .redirectErrorStream(true).start();
            p.getInputStream().readAllBytes();
            return p.waitFor(60, TimeUnit.SECONDS) && p.exitValue() == 0;
        } catch (IOException e) {
            return false;
        } catch (InterruptedException e) {
            Thread.currentThread().interrupt();
            return false;
        }
    }
}
