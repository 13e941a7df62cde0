package dev.rungbook.kernel;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertInstanceOf;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.render.MimeBundle;
import dev.rungbook.render.OutputSink;
import java.util.concurrent.CompletableFuture;
import java.util.concurrent.Executors;
import java.util.concurrent.ScheduledExecutorService;
import java.util.concurrent.Semaphore;
import java.util.concurrent.TimeUnit;
import org.junit.jupiter.api.AfterAll;
import org.junit.jupiter.api.BeforeAll;
import org.junit.jupiter.api.Test;

/**
 * Interrupting cells whose code never looks at the interrupt flag, through the kernel's {@link CellRunner}, with the
 * JDK's stop switched off: only the stop checks compiled into the cells can end them, as on JDK 20 and 21 (which
 * have neither {@code Thread.stop} nor checks of their own). The same cells on JDK 17 and 25 with the JDK's stop
 * allowed are in {@link #theChecksActBeforeTheJdksStopWhenItIsAllowed()}.
 */
public class CellRunnerStopTest {
    /** Upper bound for interrupt-to-end: the grace second, then the checks act at their next back edge or call. */
    private static final long MAX_STOP_MILLIS = CellRunner.STOP_GRACE_MILLIS + 1500;

    private static ScheduledExecutorService timer;
    private static CellEvaluator evaluator;
    private static CellRunner runner;
    private static int count;

    /** Cells call {@link #go()} when they reach their endless part, so that the test interrupts a running cell. */
    public static final class Beacon {
        private static final Semaphore GO = new Semaphore(0);

        /** Called by a cell. */
        public static void go() {
            GO.release();
        }

        static void await() throws InterruptedException {
            assertTrue(GO.tryAcquire(60, TimeUnit.SECONDS), "the cell did not start");
        }
    }

    @BeforeAll
    static void startSession() {
        timer = Executors.newSingleThreadScheduledExecutor(r -> {
            Thread t = new Thread(r, "stop-test-timer");
            t.setDaemon(true);
            return t;
        });
        runner = new CellRunner(() -> {
            CellEvaluator ev = CellEvaluator.create(System.getProperty("java.class.path"),
                    StartupScript.imports(CellRunnerStopTest.class.getClassLoader()), null);
            ev.useJdkStop(false);
            return ev;
        }, timer);
        evaluator = runner.evaluator();
    }

    @AfterAll
    static void closeSession() {
        runner.close();
        timer.shutdownNow();
    }

    private static CellResult run(String code) {
        return runner.run(code, ++count, new DiscardingSink());
    }

    /** Runs {@code code}, interrupts it once it has called {@link Beacon#go()}, and returns how it ended. */
    private static Stopped interruptWhenRunning(String code) throws Exception {
        CompletableFuture<CellResult> cell = CompletableFuture.supplyAsync(() -> run(code));
        Beacon.await();
        Thread.sleep(200);
        assertTrue(!cell.isDone(), "the cell runs until interrupted: " + (cell.isDone() ? cell.get() : ""));
        long start = System.nanoTime();
        runner.interrupt();
        CellResult r = cell.get(60, TimeUnit.SECONDS);
        long millis = TimeUnit.NANOSECONDS.toMillis(System.nanoTime() - start);
        CellResult.RuntimeFailure f = assertInstanceOf(CellResult.RuntimeFailure.class, r, String.valueOf(r));
        return new Stopped(f, millis);
    }

    private record Stopped(CellResult.RuntimeFailure failure, long millis) {
        void assertStoppedByChecks(String what, int executionCount, int line) {
            assertEquals(CellEvaluator.STOPPED_NAME, failure.errorName(), what + ": " + failure);
            assertEquals(CellEvaluator.STOPPED_MESSAGE, failure.message(), what);
            assertTrue(failure.interrupted(), what);
            assertTrue(millis <= MAX_STOP_MILLIS, what + " took " + millis + " ms after the interrupt");
            // The check's throwable carries the place where the cell was stopped; the JDK's stop leaves none.
            assertTrue(failure.traceback().stream().anyMatch(l -> l.contains("cell [" + executionCount + "] line "
                    + line)), what + ": " + failure.traceback());
            System.out.println(what + ": stopped " + millis + " ms after the interrupt");
        }
    }

    private static Object value(String code) {
        CellResult.Success s = assertInstanceOf(CellResult.Success.class, run(code), code);
        return s.value().orElse(null);
    }

    @Test
    void tightLoopsAndRecursionStopWithoutTheJdksStop() throws Exception {
        assertTrue(evaluator.stopChecksOn(), "cell classes see the kernel's StopCheck");
        String beacon = beacon();

        interruptWhenRunning(beacon + "while (true) {}").assertStoppedByChecks("while (true) {}", count, 2);
        assertEquals(42, value("int after = 41;\nafter + 1"), "the next cell runs normally");

        run("long x = 0;");
        interruptWhenRunning(beacon + "for (;;) { x++; }").assertStoppedByChecks("for (;;) { x++; }", count, 2);
        assertTrue((long) value("x") > 0, "the loop ran and its variable is kept");

        // Exponential recursion without any loop: only the checks at method entry can stop it.
        run("long calls(int n) { return n < 2 ? 1 : 1 + calls(n - 1) + calls(n - 2); }");
        interruptWhenRunning(beacon + "calls(200)").assertStoppedByChecks("recursion", count, 2);
        assertEquals(15L, value("calls(5)"), "the method works again once the stop is over");
    }

    @Test
    void theRestOfAStoppedCellDoesNotRun() throws Exception {
        run("int later = 0;");
        interruptWhenRunning(beacon() + "while (later == 0) { }\nlater = 1;\nlater = 2;")
                .assertStoppedByChecks("loop then assignments", count, 2);
        assertEquals(0, value("later"));
    }

    @Test
    void codeThatCatchesTheStopIsStoppedAgainAtItsNextCheck() throws Exception {
        run("int caught = 0;");
        String code = beacon() + "while (true) {\n    try {\n        while (true) { }\n    } catch (Throwable t) {\n"
                + "        caught++;\n    }\n}";
        Stopped s = interruptWhenRunning(code);
        assertEquals(CellEvaluator.STOPPED_NAME, s.failure().errorName(), String.valueOf(s.failure()));
        assertTrue(s.millis() <= MAX_STOP_MILLIS, s.millis() + " ms");
        assertEquals(1, value("caught"), "caught once, then stopped at the outer loop's check");
    }

    @Test
    void loopsOnOtherThreadsOfTheCellStopToo() throws Exception {
        run("java.util.concurrent.atomic.AtomicLong spins = new java.util.concurrent.atomic.AtomicLong();");
        String code = beacon() + "var pool = java.util.concurrent.Executors.newFixedThreadPool(2);\n"
                + "for (int i = 0; i < 2; i++) pool.submit(() -> { while (true) spins.incrementAndGet(); });\n"
                + "while (true) { }";
        interruptWhenRunning(code).assertStoppedByChecks("cell with two looping pool threads", count, 4);
        long before = (long) value("spins.get()");
        Thread.sleep(300);
        assertEquals(before, value("spins.get()"), "the pool's loops ended with the stop");
        run("pool.shutdownNow();");
    }

    @Test
    void theChecksActBeforeTheJdksStopWhenItIsAllowed() throws Exception {
        evaluator.useJdkStop(true);
        try {
            interruptWhenRunning(beacon() + "long y = 0;\nwhile (true) { y += 3; }")
                    .assertStoppedByChecks("with the JDK's stop allowed", count, 3);
            assertEquals(7, value("3 + 4"));
        } finally {
            evaluator.useJdkStop(false);
        }
    }

    private static String beacon() {
        return "dev.rungbook.kernel.CellRunnerStopTest.Beacon.go();\n";
    }

    /** A sink that drops the cell's output. */
    private static final class DiscardingSink implements OutputSink {
        @Override
        public void write(Stream stream, byte[] bytes, int offset, int length) {
        }

        @Override
        public void display(MimeBundle bundle, String displayId) {
        }

        @Override
        public void update(String displayId, MimeBundle bundle) {
        }

        @Override
        public void clear(boolean wait) {
        }
    }
}
