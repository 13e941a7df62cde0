package dev.rungbook.install;

import com.google.gson.GsonBuilder;
import java.io.IOException;
import java.io.UncheckedIOException;
import java.net.URISyntaxException;
import java.nio.charset.StandardCharsets;
import java.nio.file.AtomicMoveNotSupportedException;
import java.nio.file.FileVisitResult;
import java.nio.file.Files;
import java.nio.file.Path;
import java.nio.file.SimpleFileVisitor;
import java.nio.file.StandardCopyOption;
import java.nio.file.attribute.BasicFileAttributes;
import java.util.ArrayList;
import java.util.LinkedHashMap;
import java.util.List;
import java.util.Locale;
import java.util.Map;

/**
 * The Jupyter kernel spec of Rungbook (folder {@code rungbook}: {@code kernel.json} and two logos) and where it is
 * installed. The spec runs the current JDK's {@code java} with the given JVM options on the Rungbook jar (or, when
 * Rungbook runs from class folders, on the current class path) with {@code kernel run {connection_file}}.
 */
public final class KernelSpec {
    /** Name of the kernel spec folder (the kernel name clients use). */
    public static final String NAME = "rungbook";
    /** Name shown in notebook front ends. */
    public static final String DISPLAY_NAME = "Java (Rungbook)";
    /** Class with the command line's main method. */
    static final String MAIN_CLASS = "dev.rungbook.cli.Main";

    private KernelSpec() {
    }

    /** The kernels folder of the current user's Jupyter data folder ({@code $JUPYTER_DATA_DIR} first). */
    public static Path userKernelsDir() {
        String data = System.getenv("JUPYTER_DATA_DIR");
        if (data != null && !data.isBlank()) {
            return Path.of(data, "kernels");
        }
        String os = System.getProperty("os.name", "").toLowerCase(Locale.ROOT);
        Path home = Path.of(System.getProperty("user.home"));
        if (os.contains("mac")) {
            return home.resolve("Library").resolve("Jupyter").resolve("kernels");
        }
        if (os.contains("win")) {
            String appData = System.getenv("APPDATA");
            return Path.of(appData != null ? appData : home.toString(), "jupyter", "kernels");
        }
        String xdg = System.getenv("XDG_DATA_HOME");
        Path base = xdg != null && !xdg.isBlank() ? Path.of(xdg) : home.resolve(".local").resolve("share");
        return base.resolve("jupyter").resolve("kernels");
    }

    /** The kernels folder under an installation prefix ({@code PREFIX/share/jupyter/kernels}). */
    public static Path prefixKernelsDir(Path prefix) {
        return prefix.resolve("share").resolve("jupyter").resolve("kernels");
    }

    /** The JDK module of the Vector API, which the library's fused kernels use when the JVM loads it. */
    static final String VECTOR_MODULE = "jdk.incubator.vector";

    /**
     * The command line the spec runs: java, {@code --add-modules jdk.incubator.vector} when this JDK has that module
     * (the library's fused quantization kernels then run about twice as fast, with the same results; the JVM notes
     * the incubating module once on the kernel's standard error), {@code jvmOptions}, the jar or class path, then the
     * kernel command.
     */
    public static List<String> argv(List<String> jvmOptions) {
        List<String> argv = new ArrayList<>();
        argv.add(Path.of(System.getProperty("java.home"), "bin", isWindows() ? "java.exe" : "java").toString());
        if (java.lang.module.ModuleFinder.ofSystem().find(VECTOR_MODULE).isPresent()
                && jvmOptions.stream().noneMatch(o -> o.contains(VECTOR_MODULE))) {
            argv.add("--add-modules=" + VECTOR_MODULE);
        }
        argv.addAll(jvmOptions);
        argv.add("-Djava.awt.headless=true");
        Path jar = runningJar();
        if (jar != null) {
            argv.add("-jar");
            argv.add(jar.toString());
        } else {
            argv.add("-cp");
            argv.add(absoluteClassPath());
            argv.add(MAIN_CLASS);
        }
        argv.add("kernel");
        argv.add("run");
        argv.add("{connection_file}");
        return argv;
    }

    /** The content of {@code kernel.json} for {@code argv}. */
    public static String kernelJson(List<String> argv) {
        Map<String, Object> spec = new LinkedHashMap<>();
        spec.put("argv", argv);
        spec.put("display_name", DISPLAY_NAME);
        spec.put("language", "java");
        spec.put("interrupt_mode", "message");
        spec.put("env", Map.of());
        spec.put("metadata", Map.of("debugger", false));
        return new GsonBuilder().setPrettyPrinting().disableHtmlEscaping().create().toJson(spec) + "\n";
    }

    /**
     * Writes the spec folder {@code kernelsDir/rungbook} atomically: it is built in a temporary folder beside it and
     * renamed into place, replacing an earlier installation.
     *
     * @return the installed folder
     */
    public static Path install(Path kernelsDir, List<String> argv) throws IOException {
        return install(kernelsDir, (staging, target) -> argv);
    }

    /**
     * Like {@link #install(Path, List)} with {@link #argv(List) argv(jvmOptions)}, and, when Rungbook runs from its
     * jar, also a class-data archive ({@value #CLASS_ARCHIVE}, made by a training run of JShell and the renderers,
     * {@code -XX:ArchiveClassesAtExit}) that the kernel maps at start ({@code -XX:SharedArchiveFile}) so that it
     * does not load and verify the compiler's classes again: kernel start is faster. The archive fits only this JDK
     * and this jar; after either changes, install again (the JVM ignores an archive that does not fit, with a
     * warning, and starts as it would without one). When the training run fails, the spec is written without the
     * archive and {@code log} says why.
     *
     * @return the installed folder
     */
    public static Path installWithClassArchive(Path kernelsDir, List<String> jvmOptions,
            java.util.function.Consumer<String> log) throws IOException {
        Path jar = runningJar();
        if (jar == null) {
            log.accept("Rungbook runs from class folders, not its jar: no class-data archive");
            return install(kernelsDir, argv(jvmOptions));
        }
        return install(kernelsDir, (staging, target) -> {
            String made = makeClassArchive(jar, jvmOptions, staging.resolve(CLASS_ARCHIVE));
            if (made != null) {
                log.accept("no class-data archive (" + made + "); the kernel starts without one");
                return argv(jvmOptions);
            }
            List<String> options = new ArrayList<>(jvmOptions);
            options.add("-XX:SharedArchiveFile=" + target.resolve(CLASS_ARCHIVE));
            return argv(options);
        });
    }

    /** File name of the class-data archive in the spec folder. */
    public static final String CLASS_ARCHIVE = "rungbook-classes.jsa";
    /** Longest time the training run for the archive may take. */
    private static final long ARCHIVE_TIMEOUT_SECONDS = 180;

    /** Runs the training JVM; returns null when {@code archive} was written, else the reason it was not. */
    private static String makeClassArchive(Path jar, List<String> jvmOptions, Path archive) throws IOException {
        List<String> cmd = new ArrayList<>();
        cmd.add(Path.of(System.getProperty("java.home"), "bin", isWindows() ? "java.exe" : "java").toString());
        List<String> same = argv(jvmOptions);
        cmd.addAll(same.subList(1, same.indexOf("-Djava.awt.headless=true")));
        cmd.add("-XX:ArchiveClassesAtExit=" + archive);
        cmd.add("-Djava.awt.headless=true");
        cmd.addAll(List.of("-jar", jar.toString(), "kernel", "warm-up"));
        Path log = Files.createTempFile(archive.getParent(), "warm-up", ".log");
        try {
            Process p = new ProcessBuilder(cmd).redirectErrorStream(true).redirectOutput(log.toFile()).start();
            if (!p.waitFor(ARCHIVE_TIMEOUT_SECONDS, java.util.concurrent.TimeUnit.SECONDS)) {
                p.destroyForcibly();
                return "the training run took more than " + ARCHIVE_TIMEOUT_SECONDS + " s";
            }
            if (p.exitValue() != 0 || !Files.isRegularFile(archive) || Files.size(archive) == 0) {
                String out = Files.readString(log, StandardCharsets.UTF_8).strip();
                return "the training run exited with " + p.exitValue()
                        + (out.isEmpty() ? "" : ": " + out.substring(Math.max(0, out.length() - 400)));
            }
            return null;
        } catch (InterruptedException e) {
            Thread.currentThread().interrupt();
            return "interrupted";
        } finally {
            Files.deleteIfExists(log);
        }
    }

    /** Makes the command line of a spec, given its staging folder and the folder it will be renamed to. */
    private interface ArgvMaker {
        List<String> make(Path staging, Path target) throws IOException;
    }

    private static Path install(Path kernelsDir, ArgvMaker argv) throws IOException {
        Files.createDirectories(kernelsDir);
        Path target = kernelsDir.resolve(NAME);
        Path staging = Files.createTempDirectory(kernelsDir, "." + NAME + "-new-");
        try {
            List<String> command = argv.make(staging, target.toAbsolutePath());
            Files.writeString(staging.resolve("kernel.json"), kernelJson(command), StandardCharsets.UTF_8);
            Files.write(staging.resolve("logo-32x32.png"), Logo.png(32));
            Files.write(staging.resolve("logo-64x64.png"), Logo.png(64));
            Path old = null;
            if (Files.exists(target)) {
                old = kernelsDir.resolve("." + NAME + "-old-" + System.nanoTime());
                move(target, old);
            }
            move(staging, target);
            if (old != null) {
                deleteTree(old);
            }
            return target;
        } finally {
            if (Files.exists(staging)) {
                deleteTree(staging);
            }
        }
    }

    /** Removes {@code kernelsDir/rungbook}; returns whether there was one. */
    public static boolean remove(Path kernelsDir) throws IOException {
        Path target = kernelsDir.resolve(NAME);
        if (!Files.exists(target)) {
            return false;
        }
        Path doomed = kernelsDir.resolve("." + NAME + "-old-" + System.nanoTime());
        move(target, doomed);
        deleteTree(doomed);
        return true;
    }

    private static void move(Path from, Path to) throws IOException {
        try {
            Files.move(from, to, StandardCopyOption.ATOMIC_MOVE);
        } catch (AtomicMoveNotSupportedException e) {
            Files.move(from, to);
        }
    }

    private static void deleteTree(Path root) throws IOException {
        Files.walkFileTree(root, new SimpleFileVisitor<>() {
            @Override
            public FileVisitResult visitFile(Path file, BasicFileAttributes attrs) throws IOException {
                Files.delete(file);
                return FileVisitResult.CONTINUE;
            }

            @Override
            public FileVisitResult postVisitDirectory(Path dir, IOException exc) throws IOException {
                Files.delete(dir);
                return FileVisitResult.CONTINUE;
            }
        });
    }

    /** The jar Rungbook runs from, or null when it runs from class folders. */
    static Path runningJar() {
        try {
            var source = KernelSpec.class.getProtectionDomain().getCodeSource();
            if (source == null) {
                return null;
            }
            Path p = Path.of(source.getLocation().toURI());
            return Files.isRegularFile(p) && p.toString().endsWith(".jar") && isLauncherJar(p) ? p.toAbsolutePath() : null;
        } catch (URISyntaxException | RuntimeException e) {
            return null;
        }
    }

    private static boolean isLauncherJar(Path jar) {
        try (var j = new java.util.jar.JarFile(jar.toFile())) {
            var m = j.getManifest();
            return m != null && MAIN_CLASS.equals(m.getMainAttributes().getValue("Main-Class"));
        } catch (IOException e) {
            throw new UncheckedIOException(jar + ": cannot read jar manifest", e);
        }
    }

    private static String absoluteClassPath() {
        List<String> parts = new ArrayList<>();
        for (String e : System.getProperty("java.class.path").split(java.io.File.pathSeparator)) {
            if (!e.isBlank()) {
                parts.add(Path.of(e).toAbsolutePath().toString());
            }
        }
        return String.join(java.io.File.pathSeparator, parts);
    }

    private static boolean isWindows() {
        return System.getProperty("os.name", "").toLowerCase(Locale.ROOT).contains("win");
    }
}
