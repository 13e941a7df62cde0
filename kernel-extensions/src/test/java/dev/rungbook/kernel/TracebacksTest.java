package dev.rungbook.kernel;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertFalse;
import static org.junit.jupiter.api.Assertions.assertTrue;

import java.util.ArrayList;
import java.util.List;
import java.util.Map;
import org.junit.jupiter.api.Test;

class TracebacksTest {
    private final Tracebacks tracebacks = new Tracebacks(Map.of("7", new Tracebacks.SnippetPlace(3, 5))::get);

    private static StackTraceElement frame(String cls, String method, String file, int line) {
        return new StackTraceElement(cls, method, file, line);
    }

    @Test
    void keepsLibraryAndCellFramesAndDropsMachinery() {
        StackTraceElement[] trace = {
            frame("java.util.Objects", "checkIndex", "Objects.java", 359),
            frame("java.util.ArrayList", "get", "ArrayList.java", 427),
            frame("", "", "#7", 2),
            frame("jdk.internal.reflect.NativeMethodAccessorImpl", "invoke0", null, -2),
            frame("java.lang.reflect.Method", "invoke", "Method.java", 568),
            frame("jdk.jshell.execution.DirectExecutionControl", "invoke", "DirectExecutionControl.java", 227),
            frame("dev.rungbook.kernel.CellRunner", "run", "CellRunner.java", 10),
            frame("java.lang.Thread", "run", "Thread.java", 833),
        };
        List<String> lines = tracebacks.format(new Tracebacks.Failure("java.lang.IndexOutOfBoundsException",
                "Index 5 out of bounds for length 2", trace, null));
        assertEquals(List.of("java.lang.IndexOutOfBoundsException: Index 5 out of bounds for length 2",
                "    at java.util.Objects.checkIndex(Objects.java:359)",
                "    at java.util.ArrayList.get(ArrayList.java:427)",
                "    at cell [3] line 6"), lines);
    }

    @Test
    void foldsRecursion() {
        StackTraceElement[] trace = new StackTraceElement[1024];
        for (int i = 0; i < trace.length; i++) {
            trace[i] = frame("", "down", "#7", 1);
        }
        List<String> lines = tracebacks.frames(trace);
        assertEquals(List.of("    at down (cell [3] line 5)", "    ... the frame above repeated 1023 more times"),
                lines);
    }

    @Test
    void foldsTwoFrameCycles() {
        List<StackTraceElement> trace = new ArrayList<>();
        for (int i = 0; i < 50; i++) {
            trace.add(frame("", "ping", "#7", 1));
            trace.add(frame("", "pong", "#7", 2));
        }
        List<String> lines = tracebacks.frames(trace.toArray(new StackTraceElement[0]));
        assertEquals(3, lines.size(), lines.toString());
        assertTrue(lines.get(2).contains("the 2 frames above repeated 49 more times"), lines.toString());
    }

    @Test
    void shortensLongRunsOfLibraryFrames() {
        List<StackTraceElement> trace = new ArrayList<>();
        for (int i = 0; i < 30; i++) {
            trace.add(frame("org.example.Deep", "level" + i, "Deep.java", i + 1));
        }
        trace.add(frame("", "", "#7", 1));
        List<String> lines = tracebacks.frames(trace.toArray(new StackTraceElement[0]));
        assertEquals(Tracebacks.LIBRARY_HEAD + 1 + Tracebacks.LIBRARY_TAIL + 1, lines.size(), lines.toString());
        assertTrue(lines.get(Tracebacks.LIBRARY_HEAD).contains("21 library frames"), lines.toString());
        assertTrue(lines.get(lines.size() - 1).contains("cell [3]"));
    }

    @Test
    void showsCauses() {
        Tracebacks.Failure cause = new Tracebacks.Failure("java.io.IOException", "disk", new StackTraceElement[0],
                null);
        List<String> lines = tracebacks.format(new Tracebacks.Failure("java.io.UncheckedIOException", "wrapped",
                new StackTraceElement[] {frame("", "", "#7", 1)}, cause));
        assertTrue(lines.contains("Caused by: java.io.IOException: disk"), lines.toString());
    }

    @Test
    void unknownSnippetsAreStillNamed() {
        List<String> lines = tracebacks.frames(new StackTraceElement[] {frame("", "", "#99", 3)});
        assertEquals(List.of("    at snippet 99 line 3"), lines);
    }

    @Test
    void cleansWrapperNamesFromMessages() {
        assertEquals("Cannot invoke \"Object.toString()\" because \"o\" is null",
                Tracebacks.clean("Cannot invoke \"Object.toString()\" because \"REPL.$JShell$18.o\" is null"));
        assertEquals("", Tracebacks.clean(null));
        assertFalse(Tracebacks.clean("REPL.$JShell$3B.x").contains("JShell"));
    }
}
