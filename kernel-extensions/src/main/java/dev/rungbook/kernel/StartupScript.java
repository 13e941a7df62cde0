package dev.rungbook.kernel;

import java.io.IOException;
import java.nio.charset.StandardCharsets;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.ArrayList;
import java.util.List;
import java.util.Optional;

/**
 * What every kernel session evaluates before the first cell: the start-up imports, then the user's own start-up file.
 *
 * <p>The user's file is {@code $RUNGBOOK_STARTUP} if that variable is set, else
 * {@code $XDG_CONFIG_HOME/rungbook/startup.jsh} (by default {@code ~/.config/rungbook/startup.jsh}). It holds any
 * JShell snippets (imports, helper methods, variables) and is evaluated like a cell; problems in it are shown in the
 * first cell's output and do not stop the kernel.
 */
public final class StartupScript {
    /**
     * Packages of the Rungbook API imported when they exist in the running jar (the API grows package by package, so
     * a package that is not there yet is skipped).
     */
    public static final List<String> API_PACKAGES = List.of(
            "dev.rungbook.tensor", "dev.rungbook.io", "dev.rungbook.quant", "dev.rungbook.range", "dev.rungbook.round",
            "dev.rungbook.metrics", "dev.rungbook.nn", "dev.rungbook.plan", "dev.rungbook.study", "dev.rungbook.chart",
            "dev.rungbook.progress");

    /** Library packages imported when present. */
    public static final List<String> LIBRARY_PACKAGES = List.of(
            "java.util", "java.util.function", "java.util.stream", "java.nio.file", "java.io", "tech.tablesaw.api",
            "org.knowm.xchart");

    /** Static import that brings {@code display}, {@code updateDisplay}, {@code clearOutput}, {@code progress}. */
    public static final String NOTEBOOK_HELPERS = "import static dev.rungbook.render.Notebook.*;";

    private StartupScript() {
    }

    /** The import snippets for the packages of {@link #API_PACKAGES} and {@link #LIBRARY_PACKAGES} that exist. */
    public static List<String> imports(ClassLoader loader) {
        List<String> out = new ArrayList<>();
        for (String pkg : LIBRARY_PACKAGES) {
            if (pkg.startsWith("java.") || packageExists(loader, pkg)) {
                out.add("import " + pkg + ".*;");
            }
        }
        for (String pkg : API_PACKAGES) {
            if (packageExists(loader, pkg)) {
                out.add("import " + pkg + ".*;");
            }
        }
        out.add(NOTEBOOK_HELPERS);
        return out;
    }

    static boolean packageExists(ClassLoader loader, String pkg) {
        return loader.getResource(pkg.replace('.', '/') + "/") != null
                || loader.getResource(pkg.replace('.', '/')) != null;
    }

    /** The user's start-up file, whether or not it exists. */
    public static Path userFile() {
        String explicit = System.getenv("RUNGBOOK_STARTUP");
        if (explicit != null && !explicit.isBlank()) {
            return Path.of(explicit);
        }
        String xdg = System.getenv("XDG_CONFIG_HOME");
        Path base = xdg != null && !xdg.isBlank() ? Path.of(xdg) : Path.of(System.getProperty("user.home"), ".config");
        return base.resolve("rungbook").resolve("startup.jsh");
    }

    /** The text of the user's start-up file, if there is one. */
    public static Optional<String> userScript() throws IOException {
        Path file = userFile();
        if (!Files.isRegularFile(file)) {
            return Optional.empty();
        }
        return Optional.of(Files.readString(file, StandardCharsets.UTF_8));
    }
}
