package dev.rungbook.kernel;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertFalse;
import static org.junit.jupiter.api.Assertions.assertInstanceOf;
import static org.junit.jupiter.api.Assertions.assertNotNull;
import static org.junit.jupiter.api.Assertions.assertSame;
import static org.junit.jupiter.api.Assertions.assertTrue;

import java.util.List;
import org.junit.jupiter.api.AfterAll;
import org.junit.jupiter.api.BeforeAll;
import org.junit.jupiter.api.Test;
import tech.tablesaw.api.Table;

class CellEvaluatorTest {
    private static CellEvaluator shell;

    @BeforeAll
    static void startSession() {
        shell = CellEvaluator.create(System.getProperty("java.class.path"),
                StartupScript.imports(CellEvaluatorTest.class.getClassLoader()), null);
    }

    @AfterAll
    static void closeSession() {
        shell.close();
    }

    private static Object value(CellResult r) {
        CellResult.Success s = assertInstanceOf(CellResult.Success.class, r, String.valueOf(r));
        assertTrue(s.hasValue(), "cell has no value");
        return s.value().orElse(null);
    }

    @Test
    void rendersTheLastExpressionOfAMultiStatementCell() {
        assertEquals(14, value(shell.eval("int a = 3;\nint b = 4;\n2 * (a + b)", 1)));
    }

    @Test
    void valuesAreTheObjectsOfTheKernelJvm() {
        Object v = value(shell.eval("StringBuilder sb = new StringBuilder(\"abc\");\nsb", 2));
        StringBuilder sb = assertInstanceOf(StringBuilder.class, v);
        assertEquals("abc", sb.toString());
        assertSame(sb, value(shell.eval("sb", 3)), "the same object, not a copy");
    }

    @Test
    void declarationsAndStatementsHaveNoValue() {
        CellResult.Success s = assertInstanceOf(CellResult.Success.class, shell.eval("int unused = 1;", 4));
        assertFalse(s.hasValue());
        s = assertInstanceOf(CellResult.Success.class, shell.eval("System.out.print(\"\");", 5));
        assertFalse(s.hasValue());
    }

    @Test
    void startupImportsMakeTablesawTypesAvailable() {
        assertInstanceOf(Table.class, value(shell.eval("Table.create(\"t\", IntColumn.create(\"n\", 1, 2))", 6)));
        assertInstanceOf(List.class, value(shell.eval("List.of(1)", 7)));
    }

    @Test
    void compileErrorsPointAtCellLineAndColumn() {
        CellResult r = shell.eval("int a1 = 1;\nint b1 = a1 +* 2;", 8);
        CellResult.CompileFailure f = assertInstanceOf(CellResult.CompileFailure.class, r);
        CellResult.Problem p = f.problems().get(0);
        assertEquals(2, p.line());
        // "int b1 = a1 +* 2;": javac reports "illegal start of expression" at the '*' (column 14).
        assertEquals(14, p.column(), p.toString());
        assertEquals("illegal start of expression", p.message());
        assertEquals("int b1 = a1 +* 2;", p.sourceLine());
    }

    @Test
    void runtimeErrorsNameTheExceptionAndShowOnlyCellAndLibraryFrames() {
        CellResult r = shell.eval("String s = \"x\";\nint n = Integer.parseInt(s);", 9);
        CellResult.RuntimeFailure f = assertInstanceOf(CellResult.RuntimeFailure.class, r);
        assertEquals("java.lang.NumberFormatException", f.errorName());
        assertEquals("For input string: \"x\"", f.message());
        String trace = String.join("\n", f.traceback());
        assertTrue(trace.contains("at java.lang.Integer.parseInt"), trace);
        assertTrue(trace.contains("cell [9] line 2"), trace);
        for (String internal : List.of("jdk.jshell", "REPL.", "dev.rungbook.kernel", "java.lang.reflect",
                "jdk.internal.reflect")) {
            assertFalse(trace.contains(internal), internal + " in\n" + trace);
        }
    }

    @Test
    void framesOfMethodsDefinedInCellsPointAtTheirCell() {
        assertInstanceOf(CellResult.Success.class, shell.eval("\n\nint half(int x) {\n  return 10 / x;\n}", 10));
        CellResult.RuntimeFailure f = assertInstanceOf(CellResult.RuntimeFailure.class, shell.eval("half(0)", 11));
        assertEquals("java.lang.ArithmeticException", f.errorName());
        String trace = String.join("\n", f.traceback());
        assertTrue(trace.contains("half (cell [10] line 4)"), trace);
        assertTrue(trace.contains("cell [11] line 1"), trace);
    }

    @Test
    void linesCountFromTheCellAcrossBlankLinesAndComments() {
        CellResult.RuntimeFailure f = assertInstanceOf(CellResult.RuntimeFailure.class,
                shell.eval("int ok = 1;\n\n// a comment\nint bad = ok / 0;", 20));
        assertTrue(f.traceback().get(1).contains("cell [20] line 4"), String.join("\n", f.traceback()));
    }

    @Test
    void stackOverflowIsReportedWithAFoldedTraceback() {
        shell.eval("int down(int n) { return down(n + 1) + 1; }", 12);
        CellResult.RuntimeFailure f = assertInstanceOf(CellResult.RuntimeFailure.class, shell.eval("down(0)", 13));
        assertEquals("java.lang.StackOverflowError", f.errorName());
        assertTrue(f.traceback().size() < 10, String.join("\n", f.traceback()));
        assertTrue(f.traceback().stream().anyMatch(l -> l.contains("repeated")), String.join("\n", f.traceback()));
        assertEquals(2, value(shell.eval("1 + 1", 14)), "session survives");
    }

    @Test
    void nothingAfterAFailingSnippetRuns() {
        shell.eval("int marker = 0;", 15);
        shell.eval("marker = 1;\nthrow new RuntimeException(\"stop\");\nmarker = 2;", 16);
        assertEquals(1, value(shell.eval("marker", 17)));
    }

    @Test
    void exceptionMessagesDoNotShowJShellWrapperNames() {
        CellResult.RuntimeFailure f = assertInstanceOf(CellResult.RuntimeFailure.class,
                shell.eval("Object nothing = null;\nnothing.hashCode()", 18));
        assertFalse(f.message().contains("$JShell$"), f.message());
        assertTrue(f.message().contains("\"nothing\" is null"), f.message());
    }

    @Test
    void tellsCompleteIncompleteAndInvalidInput() {
        assertEquals(CellEvaluator.InputState.COMPLETE, shell.isComplete("int x = 1;\nx + 1"));
        assertEquals(CellEvaluator.InputState.INCOMPLETE, shell.isComplete("for (int i = 0; i < 3; i++) {"));
        assertEquals(CellEvaluator.InputState.INCOMPLETE, shell.isComplete("int y = 1 +"));
        assertEquals(CellEvaluator.InputState.INVALID, shell.isComplete("}"));
    }

    @Test
    void completesMembersAndVariables() {
        CellEvaluator.Completion c = shell.complete("int q = 1;\nMath.flo", "int q = 1;\nMath.flo".length());
        assertTrue(c.matches().contains("floor("), c.matches().toString());
        assertEquals("int q = 1;\nMath.".length(), c.start());
        shell.eval("int zebraCount = 3;", 19);
        assertTrue(shell.complete("zebraC", 6).matches().contains("zebraCount"));
    }

    @Test
    void inspectsSignatureAndJavadoc() {
        String doc = shell.inspect("Math.max", 6);
        assertTrue(doc.contains("max(int"), doc);
        assertNotNull(doc);
    }

    @Test
    void inspectsRungbookApiJavadocFromTheShippedSources() {
        String doc = shell.inspect("Progress.checkInterrupted", "Progress.checkInterrupted".length());
        assertTrue(doc.contains("void Progress.checkInterrupted(String task)"), doc);
        // The doc comment in api/src/main/java/dev/rungbook/progress/Progress.java.
        assertTrue(doc.contains("Long loops call this once per step"), doc);
        String type = shell.inspect("Progress", 3);
        assertTrue(type.contains("Receives reports from long-running library work"), type);
    }

    @Test
    void userStartupSnippetsRunAndTheirProblemsAreReported() {
        try (CellEvaluator other = CellEvaluator.create(System.getProperty("java.class.path"),
                List.of("import java.util.*;", "import no.such.pkg.*;"), "int fromStartup = 41;\nint broken = ;")) {
            assertTrue(other.startupProblems().stream().anyMatch(p -> p.contains("no.such.pkg")),
                    other.startupProblems().toString());
            assertTrue(other.startupProblems().stream().anyMatch(p -> p.contains("start-up file line 2")),
                    other.startupProblems().toString());
            assertEquals(42, value(other.eval("fromStartup + 1", 1)));
        }
    }
}
