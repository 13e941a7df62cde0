package dev.rungbook.docs;

import static org.junit.jupiter.api.Assertions.assertFalse;
import static org.junit.jupiter.api.Assertions.assertTrue;

import java.io.IOException;
import java.io.StringWriter;
import java.net.URI;
import java.nio.charset.StandardCharsets;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.ArrayList;
import java.util.List;
import java.util.Locale;
import java.util.regex.Matcher;
import java.util.regex.Pattern;
import javax.tools.DiagnosticCollector;
import javax.tools.JavaCompiler;
import javax.tools.JavaFileObject;
import javax.tools.SimpleJavaFileObject;
import javax.tools.ToolProvider;
import org.junit.jupiter.api.DynamicTest;
import org.junit.jupiter.api.TestFactory;

/**
 * Compiles and runs every {@code ```java} block of the top-level README.md, so the API tour cannot rot. A block runs
 * as the body of a {@code main} method (with the README's start-up imports) in a fresh JVM whose working directory is
 * the repository root.
 * Blocks fenced as {@code ```java no-run} are compiled only.
 */
class ReadmeSnippetsTest {
    private static final Pattern BLOCK = Pattern.compile("```java( no-run)?\\n(.*?)```", Pattern.DOTALL);
    /** The README's start-up imports: the JDK's and every Rungbook package present on the class path. */
    private static final String IMPORTS = imports();

    private static String imports() {
        StringBuilder sb = new StringBuilder(
                "import java.util.*;\nimport java.nio.file.*;\nimport tech.tablesaw.api.*;\n");
        for (String p : List.of("tensor", "io", "quant", "range", "round", "metrics", "study", "chart", "progress",
                "nn", "plan")) {
            if (ReadmeSnippetsTest.class.getClassLoader().getResource("dev/rungbook/" + p) != null) {
                sb.append("import dev.rungbook.").append(p).append(".*;\n");
            }
        }
        return sb.toString();
    }

    static Path repoRoot() {
        Path p = Path.of("").toAbsolutePath();
        while (p != null && !Files.exists(p.resolve("README.md"))) {
            p = p.getParent();
        }
        if (p == null) {
            throw new IllegalStateException("README.md not found above " + Path.of("").toAbsolutePath());
        }
        return p;
    }

    @TestFactory
    List<DynamicTest> readmeJavaBlocksCompileAndRun() throws IOException {
        Path root = repoRoot();
        String readme = Files.readString(root.resolve("README.md"), StandardCharsets.UTF_8);
        Matcher m = BLOCK.matcher(readme);
        List<DynamicTest> tests = new ArrayList<>();
        int n = 0;
        while (m.find()) {
            int index = ++n;
            boolean run = m.group(1) == null;
            String body = m.group(2);
            int line = readme.substring(0, m.start()).split("\n", -1).length;
            tests.add(DynamicTest.dynamicTest("README block " + index + " (line " + line + ")",
                    () -> compileAndRun(root, "ReadmeBlock" + index, body, run)));
        }
        assertFalse(tests.isEmpty(), "README.md has no ```java blocks");
        return tests;
    }

    private static void compileAndRun(Path root, String className, String body, boolean run) throws Exception {
        String source = IMPORTS + "public class " + className + " {\n public static void main(String[] args) throws Exception {\n"
                + body + "\n }\n}\n";
        JavaCompiler javac = ToolProvider.getSystemJavaCompiler();
        Path out = Files.createTempDirectory("readme-snippet");
        DiagnosticCollector<JavaFileObject> diagnostics = new DiagnosticCollector<>();
        JavaFileObject file = new SimpleJavaFileObject(URI.create("string:///" + className + ".java"),
                JavaFileObject.Kind.SOURCE) {
            @Override
            public CharSequence getCharContent(boolean ignoreEncodingErrors) {
                return source;
            }
        };
        List<String> options = List.of("-classpath", System.getProperty("java.class.path"), "-d", out.toString(),
                "-proc:none");
        StringWriter log = new StringWriter();
        boolean ok = javac.getTask(log, null, diagnostics, options, null, List.of(file)).call();
        StringBuilder msg = new StringBuilder();
        diagnostics.getDiagnostics().forEach(d -> msg.append(String.format(Locale.ROOT, "line %d: %s%n",
                d.getLineNumber() - IMPORTS.split("\n").length - 2, d.getMessage(Locale.ROOT))));
        assertTrue(ok, "README snippet does not compile:\n" + msg + log + "\n" + body);
        if (!run) {
            return;
        }
        // Run in a fresh JVM whose working directory is the repository root, as a reader would.
        String javaBin = Path.of(System.getProperty("java.home"), "bin", "java").toString();
        Process p = new ProcessBuilder(javaBin, "-Djava.awt.headless=true", "-cp",
                out + java.io.File.pathSeparator + System.getProperty("java.class.path"), className)
                .directory(root.toFile()).redirectErrorStream(true).start();
        String output = new String(p.getInputStream().readAllBytes(), StandardCharsets.UTF_8);
        boolean finished = p.waitFor(120, java.util.concurrent.TimeUnit.SECONDS);
        if (!finished) {
            p.destroyForcibly();
        }
        assertTrue(finished && p.exitValue() == 0, "README snippet failed:\n" + output + "\n" + body);
    }
}
