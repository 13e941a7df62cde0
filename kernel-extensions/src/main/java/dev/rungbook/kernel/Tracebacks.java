package dev.rungbook.kernel;

import java.util.ArrayList;
import java.util.IdentityHashMap;
import java.util.List;
import java.util.Map;
import java.util.Set;
import java.util.function.Function;

/**
 * Turns a stack trace from a notebook cell into the lines a practitioner needs: the exception, the frames of the
 * user's cells (as {@code cell [n] line k}) and the library frames between them, without the kernel's, JShell's or
 * reflection's own frames. Deep recursion (e.g. a {@link StackOverflowError}) is folded into one line per repeated
 * block.
 */
public final class Tracebacks {
    /** Library frames kept at each end of a run of library frames; the middle of a longer run is summarised. */
    static final int LIBRARY_HEAD = 6;
    static final int LIBRARY_TAIL = 3;
    /** Lines longer than this are not repeated in a traceback. */
    private static final int MAX_CAUSES = 8;
    private static final List<String> INTERNAL_PREFIXES = List.of(
            "jdk.jshell.", "jdk.internal.reflect.", "java.lang.reflect.", "sun.reflect.", "dev.rungbook.kernel.",
            "org.dflib.jjava.", "REPL.", "java.util.concurrent.ThreadPoolExecutor", "java.util.concurrent.FutureTask",
            "java.lang.Thread");

    /** Where a snippet's first line sits in a cell. */
    public record SnippetPlace(int executionCount, int firstLine) {
    }

    private final Function<String, SnippetPlace> places;

    /**
     * @param places maps a JShell snippet id (the {@code #id} file name of its frames) to its cell and first line,
     *     or null when unknown
     */
    public Tracebacks(Function<String, SnippetPlace> places) {
        this.places = places;
    }

    /** A throwable's class name, message and frames, independent of how JShell wraps exceptions. */
    public record Failure(String className, String message, StackTraceElement[] frames, Failure cause) {
    }

    /** Formats a failure chain (its causes follow as "Caused by:" blocks). */
    public List<String> format(Failure failure) {
        List<String> lines = new ArrayList<>();
        Set<Failure> seen = java.util.Collections.newSetFromMap(new IdentityHashMap<>());
        int depth = 0;
        for (Failure f = failure; f != null && seen.add(f) && depth < MAX_CAUSES; f = f.cause(), depth++) {
            String message = clean(f.message());
            String head = f.className() + (message.isEmpty() ? "" : ": " + message);
            lines.add(depth == 0 ? head : "Caused by: " + head);
            lines.addAll(frames(f.frames()));
        }
        return lines;
    }

    /** The kept frames of one throwable, already formatted with a leading {@code "    at "}. */
    List<String> frames(StackTraceElement[] trace) {
        int lastUser = -1;
        for (int i = 0; i < trace.length; i++) {
            if (isUser(trace[i])) {
                lastUser = i;
            }
        }
        // Below the last user frame there is only the machinery that invoked the cell.
        int end = lastUser >= 0 ? lastUser + 1 : trace.length;
        List<String> kept = new ArrayList<>();
        List<Boolean> library = new ArrayList<>();
        for (int i = 0; i < end; i++) {
            StackTraceElement e = trace[i];
            if (isUser(e)) {
                kept.add(describeUser(e));
                library.add(false);
            } else if (!isInternal(e)) {
                kept.add("    at " + describeLibrary(e));
                library.add(true);
            }
        }
        return shortenLibraryRuns(foldRepeats(kept, library));
    }

    private static boolean isUser(StackTraceElement e) {
        return e.getFileName() != null && e.getFileName().startsWith("#");
    }

    private static boolean isInternal(StackTraceElement e) {
        String c = e.getClassName();
        for (String p : INTERNAL_PREFIXES) {
            if (c.startsWith(p)) {
                return true;
            }
        }
        return false;
    }

    /** {@code class.method(File.java:line)}, without the module and class loader names. */
    private static String describeLibrary(StackTraceElement e) {
        String where;
        if (e.isNativeMethod()) {
            where = "native";
        } else if (e.getFileName() == null) {
            where = "unknown source";
        } else {
            where = e.getLineNumber() >= 0 ? e.getFileName() + ":" + e.getLineNumber() : e.getFileName();
        }
        return e.getClassName() + "." + e.getMethodName() + "(" + where + ")";
    }

    private String describeUser(StackTraceElement e) {
        String id = e.getFileName().substring(1);
        SnippetPlace place = places.apply(id);
        String method = e.getMethodName();
        String cls = e.getClassName();
        String who = method == null || method.isEmpty() ? "" : (cls == null || cls.isEmpty() ? method : cls + "." + method);
        String where;
        if (place == null) {
            where = "snippet " + id + " line " + e.getLineNumber();
        } else {
            int line = place.firstLine() + Math.max(e.getLineNumber(), 1) - 1;
            where = "cell [" + place.executionCount() + "] line " + line;
        }
        return "    at " + (who.isEmpty() ? where : who + " (" + where + ")");
    }

    /** A kept line and whether it is a library frame; a folded block counts as a library frame. */
    private record Line(String text, boolean library) {
    }

    /** Folds a block of up to 8 lines that repeats back to back into one occurrence plus a count line. */
    private static List<Line> foldRepeats(List<String> kept, List<Boolean> library) {
        List<Line> out = new ArrayList<>();
        int i = 0;
        int n = kept.size();
        while (i < n) {
            boolean folded = false;
            for (int len = 1; len <= 8 && i + 2 * len <= n; len++) {
                int reps = 1;
                while (i + (reps + 1) * len <= n && kept.subList(i, i + len)
                        .equals(kept.subList(i + reps * len, i + (reps + 1) * len))) {
                    reps++;
                }
                if (reps >= 3) {
                    for (int k = 0; k < len; k++) {
                        out.add(new Line(kept.get(i + k), library.get(i + k)));
                    }
                    out.add(new Line("    ... the " + (len == 1 ? "frame above" : len + " frames above")
                            + " repeated " + (reps - 1) + " more times", false));
                    i += reps * len;
                    folded = true;
                    break;
                }
            }
            if (!folded) {
                out.add(new Line(kept.get(i), library.get(i)));
                i++;
            }
        }
        return out;
    }

    private static List<String> shortenLibraryRuns(List<Line> lines) {
        List<String> out = new ArrayList<>();
        int i = 0;
        while (i < lines.size()) {
            if (!lines.get(i).library()) {
                out.add(lines.get(i).text());
                i++;
                continue;
            }
            int j = i;
            while (j < lines.size() && lines.get(j).library()) {
                j++;
            }
            int run = j - i;
            if (run <= LIBRARY_HEAD + LIBRARY_TAIL + 1) {
                for (int k = i; k < j; k++) {
                    out.add(lines.get(k).text());
                }
            } else {
                for (int k = i; k < i + LIBRARY_HEAD; k++) {
                    out.add(lines.get(k).text());
                }
                out.add("    ... " + (run - LIBRARY_HEAD - LIBRARY_TAIL) + " library frames ...");
                for (int k = j - LIBRARY_TAIL; k < j; k++) {
                    out.add(lines.get(k).text());
                }
            }
            i = j;
        }
        return out;
    }

    /**
     * An exception message without JShell's wrapper class names (e.g. {@code "REPL.$JShell$18.o" is null} becomes
     * {@code "o" is null}); null becomes an empty string.
     */
    public static String clean(String message) {
        return message == null ? "" : message.replaceAll("REPL\\.\\$JShell\\$\\d+[A-Za-z]?\\.", "");
    }

    /** A failure from a plain throwable (used for errors raised by the kernel itself, and in tests). */
    public static Failure of(Throwable t) {
        Map<Throwable, Failure> done = new IdentityHashMap<>();
        return of(t, done, 0);
    }

    private static Failure of(Throwable t, Map<Throwable, Failure> done, int depth) {
        if (t == null || depth > MAX_CAUSES || done.containsKey(t)) {
            return null;
        }
        done.put(t, null);
        String name = t instanceof jdk.jshell.EvalException ee ? ee.getExceptionClassName() : t.getClass().getName();
        Failure f = new Failure(name, t.getMessage(), t.getStackTrace(), of(t.getCause(), done, depth + 1));
        done.put(t, f);
        return f;
    }
}
