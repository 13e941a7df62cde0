package dev.rungbook.kernel;

import java.io.File;
import java.util.ArrayList;
import java.util.Collections;
import java.util.LinkedHashSet;
import java.util.List;
import java.util.Locale;
import java.util.Map;
import java.util.Set;
import java.util.concurrent.ConcurrentHashMap;
import jdk.jshell.Diag;
import jdk.jshell.EvalException;
import jdk.jshell.ExpressionSnippet;
import jdk.jshell.JShell;
import jdk.jshell.JShellException;
import jdk.jshell.Snippet;
import jdk.jshell.SnippetEvent;
import jdk.jshell.SourceCodeAnalysis;
import jdk.jshell.SourceCodeAnalysis.Completeness;
import jdk.jshell.SourceCodeAnalysis.CompletionInfo;
import jdk.jshell.UnresolvedReferenceException;
import jdk.jshell.VarSnippet;

/**
 * Evaluates notebook cells with JShell in this JVM (so that values can be rendered), one cell at a time. A cell may
 * hold many snippets; they run in order until one fails to compile or throws. Also answers completion, inspection and
 * is-complete questions. Not thread-safe: the kernel calls it from one thread at a time ({@link #stop()} excepted).
 */
public final class CellEvaluator implements AutoCloseable {
    /** Answer of {@link #isComplete(String)}, as named by the Jupyter protocol. */
    public enum InputState {
        COMPLETE, INCOMPLETE, INVALID
    }

    /** Completion candidates replacing {@code [start, end)} of the cell. */
    public record Completion(List<String> matches, int start, int end) {
        /** @param matches candidates (copied) */
        public Completion {
            matches = List.copyOf(matches);
        }
    }

    /** The {@code ename} of a cell that was stopped on request (the kernel's name for an interrupted cell). */
    static final String STOPPED_NAME = "Interrupted";
    /** The message of a cell that was stopped on request. */
    static final String STOPPED_MESSAGE = "the cell was stopped";

    private final JShell shell;
    private final ValueCapturingExecutionControl control;
    private final SourceCodeAnalysis analysis;
    private final Map<String, Tracebacks.SnippetPlace> places = new ConcurrentHashMap<>();
    private final Tracebacks tracebacks = new Tracebacks(places::get);
    private final List<String> startupProblems = new ArrayList<>();
    private final SourceDocs sourceDocs = new SourceDocs(CellEvaluator.class.getClassLoader());

    private CellEvaluator(JShell shell, ValueCapturingExecutionControl control) {
        this.shell = shell;
        this.control = control;
        this.analysis = shell.sourceCodeAnalysis();
    }

    /**
     * A fresh session whose compiler sees {@code classPath} (normally this JVM's class path) and which has evaluated
     * the start-up imports and, when {@code userStartup} is not null, the user's start-up snippets.
     */
    public static CellEvaluator create(String classPath, List<String> imports, String userStartup) {
        ValueCapturingExecutionControl.Provider provider = new ValueCapturingExecutionControl.Provider();
        JShell shell = JShell.builder()
                .executionEngine(provider, Map.of())
                .compilerOptions("-Xlint:-options")
                .build();
        for (String entry : classPath.split(File.pathSeparator)) {
            if (!entry.isBlank()) {
                shell.addToClasspath(entry);
            }
        }
        CellEvaluator evaluator = new CellEvaluator(shell, provider.created());
        for (String snippet : imports) {
            for (SnippetEvent e : shell.eval(snippet)) {
                if (e.causeSnippet() == null && e.status() == Snippet.Status.REJECTED) {
                    evaluator.startupProblems.add("start-up import skipped: " + snippet.strip());
                }
            }
        }
        if (userStartup != null && !userStartup.isBlank()) {
            CellResult r = evaluator.eval(userStartup, 0);
            if (r instanceof CellResult.CompileFailure c) {
                for (CellResult.Problem p : c.problems()) {
                    evaluator.startupProblems.add("start-up file line " + p.line() + ", column " + p.column() + ": "
                            + p.message());
                }
            } else if (r instanceof CellResult.RuntimeFailure f) {
                evaluator.startupProblems.add("start-up file failed: " + f.errorName() + ": " + f.message());
            }
        }
        evaluator.warmUp();
        return evaluator;
    }

    /** Compiles and runs one throw-away snippet so that the first cell does not pay for JShell's warm-up. */
    private void warmUp() {
        for (SnippetEvent e : shell.eval("Object rungbookWarmUp = java.util.List.of(1).get(0);")) {
            shell.drop(e.snippet());
        }
    }

    /** Problems met while evaluating the start-up imports and file (empty when all went well). */
    public List<String> startupProblems() {
        return Collections.unmodifiableList(startupProblems);
    }

    /**
     * Evaluates a cell on the calling thread. Runtime failures of the user's code are returned, never thrown.
     *
     * @param code the cell's source
     * @param executionCount the cell's number, used in tracebacks
     */
    public CellResult eval(String code, int executionCount) {
        clearStop();
        return evalKeepingStop(code, executionCount);
    }

    /** Clears a stop request left by {@link #stop()}; {@link #eval} does this itself. */
    void clearStop() {
        control.clearStop();
    }

    /**
     * {@link #eval} without clearing the stop request first: a runner that clears it when it hands the cell over
     * keeps a stop that arrives before the cell thread gets to the cell.
     */
    CellResult evalKeepingStop(String code, int executionCount) {
        String rest = code;
        int offset = 0;
        CellResult.Success last = CellResult.Success.noValue();
        while (!rest.isBlank()) {
            CompletionInfo info = analysis.analyzeCompletion(rest);
            Completeness c = info.completeness();
            if (c == Completeness.EMPTY) {
                break;
            }
            int lead = firstCode(rest);
            if (c == Completeness.DEFINITELY_INCOMPLETE || c == Completeness.CONSIDERED_INCOMPLETE
                    || info.source() == null) {
                return new CellResult.CompileFailure(List.of(problem(code, offset + lead,
                        "the cell ends inside an unfinished statement or declaration")));
            }
            String full = info.source();
            int consumed = rest.length() - info.remaining().length();
            // JShell numbers frame lines from the first non-blank character; give it the source from there.
            int sourceLead = firstCode(full);
            String source = full.substring(sourceLead);
            int sourceZero = offset + placeOf(rest, full) + sourceLead;
            List<SnippetEvent> events = shell.eval(source);
            for (SnippetEvent e : events) {
                if (e.causeSnippet() != null) {
                    continue;
                }
                Snippet s = e.snippet();
                places.put(s.id(), new Tracebacks.SnippetPlace(executionCount, lineOf(code, Math.max(sourceZero, 0))));
                if (control.stopAsked() || isStopCheck(e.exception())) {
                    // Also when the JDK's stop ended the snippet silently: the rest of the cell must not run.
                    return stopped(e.exception());
                }
                if (e.status() == Snippet.Status.REJECTED) {
                    List<CellResult.Problem> problems = new ArrayList<>();
                    for (Diag d : (Iterable<Diag>) shell.diagnostics(s)::iterator) {
                        if (d.isError()) {
                            int pos = (int) Math.max(0, d.getStartPosition());
                            problems.add(problem(code, Math.max(0, sourceZero) + pos, d.getMessage(Locale.ROOT)));
                        }
                    }
                    if (problems.isEmpty()) {
                        problems.add(problem(code, offset + lead, "the snippet was rejected by the compiler"));
                    }
                    return new CellResult.CompileFailure(problems);
                }
                if (e.exception() != null) {
                    return failure(e.exception());
                }
                last = valueOf(s);
            }
            offset += consumed;
            rest = info.remaining();
        }
        return last;
    }

    private CellResult.Success valueOf(Snippet s) {
        if (s instanceof VarSnippet v && v.subKind() == Snippet.SubKind.TEMP_VAR_EXPRESSION_SUBKIND) {
            return CellResult.Success.of(read(v));
        }
        if (s instanceof ExpressionSnippet ex) {
            for (VarSnippet v : (Iterable<VarSnippet>) shell.variables()::iterator) {
                if (v.name().equals(ex.name()) && shell.status(v).isActive()) {
                    return CellResult.Success.of(read(v));
                }
            }
        }
        return CellResult.Success.noValue();
    }

    private Object read(VarSnippet v) {
        return control.capture(() -> shell.varValue(v));
    }

    private static boolean isStopCheck(JShellException ex) {
        return ex instanceof EvalException ee && StopCheck.Stopped.class.getName().equals(ee.getExceptionClassName());
    }

    /** An interrupted cell's failure, with the cell lines where a stop check ended it (when it was one). */
    private CellResult.RuntimeFailure stopped(JShellException ex) {
        List<String> lines = new ArrayList<>();
        lines.add(STOPPED_NAME + ": " + STOPPED_MESSAGE);
        if (isStopCheck(ex)) {
            lines.addAll(tracebacks.frames(ex.getStackTrace()));
        }
        return new CellResult.RuntimeFailure(STOPPED_NAME, STOPPED_MESSAGE, lines, true);
    }

    private CellResult.RuntimeFailure failure(JShellException ex) {
        if (ex instanceof UnresolvedReferenceException u) {
            String what = u.getSnippet().name();
            List<String> unresolved = shell.unresolvedDependencies(u.getSnippet()).toList();
            String msg = what + " cannot be used until " + String.join(", ", unresolved) + " is declared";
            return new CellResult.RuntimeFailure("UnresolvedReference", msg, List.of(msg), false);
        }
        Tracebacks.Failure f = Tracebacks.of(ex);
        String name = ex instanceof EvalException ee ? ee.getExceptionClassName() : ex.getClass().getName();
        String message = Tracebacks.clean(ex.getMessage());
        return new CellResult.RuntimeFailure(name, message, tracebacks.format(f), false);
    }

    /** The traceback formatter of this session (knows where each snippet sits in its cell). */
    public Tracebacks tracebacks() {
        return tracebacks;
    }

    /**
     * Stops the snippet that is running, from any thread (see {@link JShell#stop()}): its stop checks throw at once
     * (see {@link ValueCapturingExecutionControl} for what that covers); if it is still running after
     * {@link ValueCapturingExecutionControl#SELF_STOP_MILLIS}, the JDK's own stop is tried. The cell then ends with
     * the error {@value #STOPPED_NAME} and none of its later snippets run. Returns when the cell has left or the
     * JDK's stop has been tried.
     */
    public void stop() {
        shell.stop();
    }

    /**
     * Whether {@link #stop()} may fall back on the JDK's stop. With {@code false} only the stop checks act, as on
     * JDK 20 and 21, which have neither {@code Thread.stop} nor checks of their own; for tests.
     */
    void useJdkStop(boolean use) {
        control.useJdkStop(use);
    }

    /** Whether cell classes get stop checks (known once the first cell class is loaded, e.g. after {@link #create}). */
    boolean stopChecksOn() {
        return control.stopChecksOn();
    }

    /** Completion candidates at {@code cursor}. */
    public Completion complete(String code, int cursor) {
        cursor = Math.max(0, Math.min(cursor, code.length()));
        int start = snippetStart(code, cursor);
        String snippet = code.substring(start, cursor);
        int[] anchor = new int[1];
        List<SourceCodeAnalysis.Suggestion> suggestions = analysis.completionSuggestions(snippet, snippet.length(),
                anchor);
        Set<String> matches = new LinkedHashSet<>();
        for (SourceCodeAnalysis.Suggestion s : suggestions) {
            if (s.matchesType()) {
                matches.add(s.continuation());
            }
        }
        for (SourceCodeAnalysis.Suggestion s : suggestions) {
            matches.add(s.continuation());
        }
        return new Completion(new ArrayList<>(matches), start + anchor[0], cursor);
    }

    /**
     * Signature and Javadoc of what is at {@code cursor}, or an empty string when nothing is known there. Javadoc
     * comes from the sources JShell finds (for the JDK: its {@code lib/src.zip}).
     */
    public String inspect(String code, int cursor) {
        cursor = Math.max(0, Math.min(cursor, code.length()));
        int start = snippetStart(code, cursor);
        // Inspect up to the end of the identifier under the cursor.
        int end = cursor;
        while (end < code.length() && Character.isJavaIdentifierPart(code.charAt(end))) {
            end++;
        }
        String snippet = code.substring(start, end);
        List<SourceCodeAnalysis.Documentation> docs = analysis.documentation(snippet, snippet.length(), true);
        if (docs.isEmpty()) {
            docs = analysis.documentation(snippet + "(", snippet.length() + 1, true);
        }
        StringBuilder out = new StringBuilder();
        for (SourceCodeAnalysis.Documentation d : docs) {
            if (out.length() > 0) {
                out.append("\n\n");
            }
            out.append(d.signature());
            String javadoc = d.javadoc() != null && !d.javadoc().isBlank() ? d.javadoc() : apiJavadoc(d.signature());
            if (!javadoc.isBlank()) {
                out.append("\n\n").append(javadoc.strip());
            }
        }
        return out.toString();
    }

    /**
     * Javadoc of a Rungbook API element from the shipped sources, given JShell's signature: either a type's
     * qualified name or {@code "Ret Type.member(params)"}.
     */
    private String apiJavadoc(String signature) {
        if (signature.startsWith("dev.rungbook.") && !signature.contains(" ") && !signature.contains("(")) {
            return sourceDocs.javadoc(signature, null, -1);
        }
        java.util.regex.Matcher m = java.util.regex.Pattern
                .compile("(?:\\S+\\s+)?([\\w$]+)\\.([\\w$]+)\\((.*)\\)").matcher(signature);
        if (!m.matches()) {
            return "";
        }
        List<SourceCodeAnalysis.Documentation> type = analysis.documentation(m.group(1), m.group(1).length(), false);
        if (type.isEmpty() || !type.get(0).signature().startsWith("dev.rungbook.")) {
            return "";
        }
        String params = m.group(3).strip();
        int count = params.isEmpty() ? 0 : params.split(",").length;
        return sourceDocs.javadoc(type.get(0).signature(), m.group(2), count);
    }

    /** Whether the cell is complete, needs more lines, or cannot become valid by adding lines. */
    public InputState isComplete(String code) {
        String rest = code;
        while (!rest.isBlank()) {
            CompletionInfo info = analysis.analyzeCompletion(rest);
            switch (info.completeness()) {
                case EMPTY:
                    return InputState.COMPLETE;
                case COMPLETE:
                case COMPLETE_WITH_SEMI:
                    rest = info.remaining();
                    break;
                case DEFINITELY_INCOMPLETE:
                case CONSIDERED_INCOMPLETE:
                    return InputState.INCOMPLETE;
                default:
                    return InputState.INVALID;
            }
        }
        return InputState.COMPLETE;
    }

    /** Start of the snippet that contains {@code cursor}. */
    private int snippetStart(String code, int cursor) {
        int start = 0;
        String rest = code;
        while (!rest.isBlank()) {
            CompletionInfo info = analysis.analyzeCompletion(rest);
            Completeness c = info.completeness();
            if (!(c == Completeness.COMPLETE || c == Completeness.COMPLETE_WITH_SEMI)) {
                break;
            }
            int consumed = rest.length() - info.remaining().length();
            if (consumed <= 0 || start + consumed >= cursor) {
                break;
            }
            start += consumed;
            rest = info.remaining();
        }
        while (start < cursor && Character.isWhitespace(code.charAt(start))) {
            start++;
        }
        return start;
    }

    @Override
    public void close() {
        shell.close();
    }

    private static int firstCode(String s) {
        int i = 0;
        while (i < s.length() && Character.isWhitespace(s.charAt(i))) {
            i++;
        }
        return i;
    }

    /** Offset in {@code rest} of position 0 of {@code source} (JShell may trim or append a semicolon). */
    private static int placeOf(String rest, String source) {
        int lead = firstCode(source);
        String probe = source.substring(lead, Math.min(source.length(), lead + 40)).strip();
        while (!probe.isEmpty()) {
            int at = rest.indexOf(probe);
            if (at >= 0) {
                return at - lead;
            }
            probe = probe.substring(0, probe.length() - 1);
        }
        return firstCode(rest) - lead;
    }

    static int lineOf(String code, int pos) {
        int line = 1;
        for (int i = 0; i < Math.min(pos, code.length()); i++) {
            if (code.charAt(i) == '\n') {
                line++;
            }
        }
        return line;
    }

    static CellResult.Problem problem(String code, int pos, String message) {
        pos = Math.max(0, Math.min(pos, code.length()));
        int lineStart = code.lastIndexOf('\n', pos - 1) + 1;
        int lineEnd = code.indexOf('\n', pos);
        if (lineEnd < 0) {
            lineEnd = code.length();
        }
        return new CellResult.Problem(lineOf(code, pos), pos - lineStart + 1, message,
                code.substring(lineStart, lineEnd));
    }
}
