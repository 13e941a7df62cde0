package dev.rungbook.kernel;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertFalse;
import static org.junit.jupiter.api.Assertions.assertInstanceOf;
import static org.junit.jupiter.api.Assertions.assertNotNull;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import java.io.IOException;
import java.io.InputStream;
import java.lang.invoke.MethodHandles;
import java.lang.invoke.VarHandle;
import java.lang.reflect.InvocationTargetException;
import java.lang.reflect.Method;
import java.util.concurrent.TimeUnit;
import java.util.concurrent.atomic.AtomicReference;
import java.util.stream.IntStream;
import org.junit.jupiter.api.AfterEach;
import org.junit.jupiter.api.Test;
import org.objectweb.asm.ClassWriter;
import org.objectweb.asm.Label;
import org.objectweb.asm.MethodVisitor;
import org.objectweb.asm.Opcodes;

/**
 * The stop-check rewriting on classes made here: javac's code for loops, nested loops, a switch in a loop, recursion,
 * a lambda and a constructor, and hand-made methods whose {@code tableswitch} / {@code lookupswitch} jump backwards.
 * A counting check shows where the checks run (once on entry, once per back edge taken); the real check shows that a
 * method already looping is stopped, and results are unchanged otherwise.
 */
public class StopCheckInstrumenterTest {
    private static final String COUNTER = Counter.class.getName().replace('.', '/');
    /** Reads the spinning loop's counter without letting the JIT hoist the read. */
    private static final VarHandle ELEMENT = MethodHandles.arrayElementVarHandle(long[].class);

    /** A check that counts its calls and throws once a limit is passed (public: the rewritten classes call it). */
    public static final class Counter {
        static long calls;
        static long limit = Long.MAX_VALUE;

        /** The check. */
        public static void tick() {
            if (++calls > limit) {
                throw new IllegalStateException("limit of " + limit + " checks passed");
            }
        }

        static void reset(long newLimit) {
            calls = 0;
            limit = newLimit;
        }
    }

    /** The code to rewrite (compiled by javac with the test classes). */
    public static final class Sample {
        /** Set by the constructor's loop. */
        public final int built;

        /** A constructor with a loop before and after {@code this} is usable. */
        public Sample(int n) {
            super();
            int b = 0;
            for (int i = 0; i < n; i++) {
                b += i;
            }
            built = b;
        }

        /** Sum of 0..n-1, one loop. */
        public static long sum(int n) {
            long s = 0;
            for (int i = 0; i < n; i++) {
                s += i;
            }
            return s;
        }

        /** A nested loop. */
        public static long nested(int n, int m) {
            long s = 0;
            for (int i = 0; i < n; i++) {
                for (int j = 0; j < m; j++) {
                    s += (long) i * j;
                }
            }
            return s;
        }

        /** A while loop around a dense switch (tableswitch) and a sparse one (lookupswitch). */
        public static int machine(int steps) {
            int state = 0;
            int out = 0;
            int k = 0;
            while (k < steps) {
                switch (state) {
                    case 0 -> state = 1;
                    case 1 -> state = 2;
                    case 2 -> state = 0;
                    default -> throw new IllegalStateException();
                }
                switch (k % 1000) {
                    case 7 -> out += 7;
                    case 500 -> out -= 3;
                    case 999 -> out += state;
                    default -> out += 1;
                }
                k++;
            }
            return out * 10 + state;
        }

        /** Recursion without any loop. */
        public static int depth(int n) {
            return n == 0 ? 0 : 1 + depth(n - 1);
        }

        /** A loop in a lambda. */
        public static int squares(int n) {
            return IntStream.range(0, n).map(i -> {
                int q = 0;
                for (int r = 0; r < i; r++) {
                    q += i;
                }
                return q;
            }).sum();
        }

        /** Never returns unless stopped; counts its iterations in {@code box[0]}. */
        public static void spin(long[] box) {
            while (true) {
                box[0]++;
            }
        }
    }

    @AfterEach
    void clearRequests() {
        while (StopCheck.requested()) {
            StopCheck.withdraw();
        }
        StopCheck.dropIdleMarks();
        Counter.reset(Long.MAX_VALUE);
    }

    private static byte[] classFile(Class<?> c) throws IOException {
        String file = c.getName().substring(c.getName().lastIndexOf('.') + 1) + ".class";
        try (InputStream in = c.getResourceAsStream(file)) {
            assertNotNull(in, c.getName());
            return in.readAllBytes();
        }
    }

    /** Defines one class from bytes in a fresh loader (so that the JVM verifies it) whose parent sees the tests. */
    private static Class<?> define(String name, byte[] bytes) {
        return new ClassLoader(StopCheckInstrumenterTest.class.getClassLoader()) {
            Class<?> load() {
                return defineClass(name, bytes, 0, bytes.length);
            }
        }.load();
    }

    private static Class<?> sample(StopCheckInstrumenter instrumenter) throws IOException {
        return define(Sample.class.getName(), instrumenter.instrument(classFile(Sample.class)));
    }

    private static Object call(Class<?> c, String name, Object... args) throws Exception {
        for (Method m : c.getMethods()) {
            if (m.getName().equals(name) && m.getParameterCount() == args.length) {
                try {
                    return m.invoke(null, args);
                } catch (InvocationTargetException e) {
                    if (e.getCause() instanceof Exception x) {
                        throw x;
                    }
                    throw (Error) e.getCause();
                }
            }
        }
        throw new NoSuchMethodException(name);
    }

    @Test
    void rewrittenCodeComputesWhatTheOriginalComputes() throws Exception {
        Class<?> checked = sample(new StopCheckInstrumenter());
        // The original results come from the same source run without rewriting (the test's own Sample).
        assertEquals(Sample.sum(1000), call(checked, "sum", 1000));
        assertEquals(Sample.nested(40, 30), call(checked, "nested", 40, 30));
        assertEquals(Sample.machine(5000), call(checked, "machine", 5000));
        assertEquals(Sample.depth(500), call(checked, "depth", 500));
        assertEquals(Sample.squares(200), call(checked, "squares", 200));
        Object built = checked.getConstructor(int.class).newInstance(100);
        assertEquals(new Sample(100).built, checked.getField("built").get(built));
        // Source: closed forms, sum_{i<n} i = n(n-1)/2 and sum_{i<n,j<m} i*j = n(n-1)/2 * m(m-1)/2.
        assertEquals(1000L * 999 / 2, call(checked, "sum", 1000));
        assertEquals(40L * 39 / 2 * (30L * 29 / 2), call(checked, "nested", 40, 30));
    }

    @Test
    void checksRunOnEntryAndOnEveryBackEdge() throws Exception {
        Class<?> counted = sample(new StopCheckInstrumenter(COUNTER, "tick"));
        // javac puts a for loop's test at the top and jumps back with a GOTO once per iteration: one check on entry
        // and one per iteration; a compiler that tests at the bottom would add one check, hence the ranges.
        int n = 1000;
        Counter.reset(Long.MAX_VALUE);
        call(counted, "sum", n);
        assertInRange(n + 1, n + 2, Counter.calls, "sum(" + n + ")");

        Counter.reset(Long.MAX_VALUE);
        call(counted, "nested", 40, 30);
        long nestedChecks = 40 * 30 + 40 + 1;
        assertInRange(nestedChecks, nestedChecks + 40 + 1, Counter.calls, "nested(40, 30)");

        // A while loop around two switches whose targets are all forward: only the loop's own back edge counts.
        Counter.reset(Long.MAX_VALUE);
        call(counted, "machine", 5000);
        assertInRange(5000 + 1, 5000 + 2, Counter.calls, "machine(5000)");

        // Recursion: one check per call, n + 1 calls.
        Counter.reset(Long.MAX_VALUE);
        call(counted, "depth", 500);
        assertEquals(501, Counter.calls, "depth(500)");

        // The lambda runs its own loop i times for i < n, plus its entry each time; squares() adds its own entry.
        Counter.reset(Long.MAX_VALUE);
        call(counted, "squares", 100);
        long lambdaChecks = 100 * 99 / 2 + 100 + 1;
        assertInRange(lambdaChecks, lambdaChecks + 100, Counter.calls, "squares(100)");

        Counter.reset(Long.MAX_VALUE);
        counted.getConstructor(int.class).newInstance(50);
        assertInRange(51, 52, Counter.calls, "new Sample(50)");
    }

    @Test
    void aCheckThatThrowsEndsLoopsAndRecursionPartWay() throws Exception {
        Class<?> counted = sample(new StopCheckInstrumenter(COUNTER, "tick"));
        Counter.reset(10);
        assertThrows(IllegalStateException.class, () -> call(counted, "depth", 1_000_000));
        assertEquals(11, Counter.calls);
        Counter.reset(10);
        long[] box = new long[1];
        assertThrows(IllegalStateException.class, () -> call(counted, "spin", (Object) box));
        // Entered once, then stopped at the 10th back edge: the loop body ran 10 times.
        assertEquals(10, box[0]);
    }

    @Test
    void backwardTableAndLookupSwitchesGetChecks() throws Exception {
        byte[] made = countdownClass();
        Class<?> plain = define("dev.rungbook.kernel.Countdown", made);
        Class<?> counted = define("dev.rungbook.kernel.Countdown",
                new StopCheckInstrumenter(COUNTER, "tick").instrument(made));
        for (String m : new String[] {"table", "lookup"}) {
            Counter.reset(Long.MAX_VALUE);
            // Source: sum 1..n = n(n+1)/2 (the method adds n, n-1, ..., 1).
            assertEquals(100 * 101 / 2, call(plain, m, 100), m);
            assertEquals(0, Counter.calls, "the original has no checks");
            assertEquals(100 * 101 / 2, call(counted, m, 100), m);
            // The switch runs n times (n - 1 of them jumping back): entry plus one check per switch.
            assertEquals(101, Counter.calls, m);
        }
    }

    /**
     * A class with {@code static int table(int n)} and {@code static int lookup(int n)}: {@code acc += n; n--;} then a
     * switch on {@code n} whose case 0 leaves and whose default jumps back to the top, so the only loop edge is the
     * switch itself (javac never makes such code).
     */
    private static byte[] countdownClass() {
        ClassWriter cw = new ClassWriter(ClassWriter.COMPUTE_FRAMES);
        cw.visit(Opcodes.V17, Opcodes.ACC_PUBLIC | Opcodes.ACC_SUPER, "dev/rungbook/kernel/Countdown", null,
                "java/lang/Object", null);
        for (String name : new String[] {"table", "lookup"}) {
            MethodVisitor mv = cw.visitMethod(Opcodes.ACC_PUBLIC | Opcodes.ACC_STATIC, name, "(I)I", null, null);
            mv.visitCode();
            mv.visitInsn(Opcodes.ICONST_0);
            mv.visitVarInsn(Opcodes.ISTORE, 1);
            Label top = new Label();
            Label done = new Label();
            mv.visitLabel(top);
            mv.visitVarInsn(Opcodes.ILOAD, 1);
            mv.visitVarInsn(Opcodes.ILOAD, 0);
            mv.visitInsn(Opcodes.IADD);
            mv.visitVarInsn(Opcodes.ISTORE, 1);
            mv.visitIincInsn(0, -1);
            mv.visitVarInsn(Opcodes.ILOAD, 0);
            if (name.equals("table")) {
                mv.visitTableSwitchInsn(0, 0, top, done);
            } else {
                mv.visitLookupSwitchInsn(top, new int[] {0, 1_000_000}, new Label[] {done, top});
            }
            mv.visitLabel(done);
            mv.visitVarInsn(Opcodes.ILOAD, 1);
            mv.visitInsn(Opcodes.IRETURN);
            mv.visitMaxs(0, 0);
            mv.visitEnd();
        }
        cw.visitEnd();
        return cw.toByteArray();
    }

    @Test
    void theRealCheckStopsAMethodThatIsAlreadyLooping() throws Exception {
        Class<?> checked = sample(new StopCheckInstrumenter());
        long[] box = new long[1];
        AtomicReference<Throwable> thrown = new AtomicReference<>();
        Thread t = new Thread(() -> {
            try {
                call(checked, "spin", (Object) box);
            } catch (Throwable e) {
                thrown.set(e);
            }
        }, "spin");
        t.setDaemon(true);
        t.start();
        long deadline = System.nanoTime() + TimeUnit.SECONDS.toNanos(30);
        while ((long) ELEMENT.getVolatile(box, 0) == 0 && System.nanoTime() < deadline) {
            Thread.onSpinWait();
        }
        assertTrue((long) ELEMENT.getVolatile(box, 0) > 0, "the loop is running (past the entry check)");
        Thread.sleep(50);
        assertTrue(t.isAlive(), "spins until asked");
        StopCheck.request();
        t.join(10_000);
        assertFalse(t.isAlive(), "stopped at a back edge");
        assertInstanceOf(StopCheck.Stopped.class, thrown.get());
        // With the request withdrawn the same code runs normally again.
        StopCheck.withdraw();
        assertEquals(Sample.sum(10), call(checked, "sum", 10));
    }

    @Test
    void aMarkedThreadOwesOneStopAndOthersRunOn() throws Exception {
        Class<?> checked = sample(new StopCheckInstrumenter());
        long[] box = new long[1];
        AtomicReference<Throwable> thrown = new AtomicReference<>();
        Thread spinner = new Thread(() -> {
            try {
                call(checked, "spin", (Object) box);
            } catch (Throwable e) {
                thrown.set(e);
            }
        }, "spin");
        spinner.setDaemon(true);
        java.util.concurrent.CountDownLatch never = new java.util.concurrent.CountDownLatch(1);
        Thread idle = new Thread(() -> {
            try {
                never.await();
            } catch (InterruptedException e) {
                Thread.currentThread().interrupt();
            }
        }, "idle");
        idle.setDaemon(true);
        spinner.start();
        idle.start();
        long deadline = System.nanoTime() + TimeUnit.SECONDS.toNanos(30);
        while (((long) ELEMENT.getVolatile(box, 0) == 0 || idle.getState() != Thread.State.WAITING)
                && System.nanoTime() < deadline) {
            Thread.onSpinWait();
        }
        StopCheck.mark(idle);
        StopCheck.mark(spinner);
        assertEquals(2, StopCheck.marked());
        // No request: the test thread is not marked and runs rewritten code normally.
        assertFalse(StopCheck.requested());
        assertEquals(Sample.sum(100), call(checked, "sum", 100));
        spinner.join(10_000);
        assertFalse(spinner.isAlive(), "the marked thread stopped at its next check");
        assertInstanceOf(StopCheck.Stopped.class, thrown.get());
        assertEquals(1, StopCheck.marked(), "the spinner paid its stop; the idle thread still owes one");
        StopCheck.dropIdleMarks();
        assertEquals(0, StopCheck.marked(), "a waiting thread's mark is dropped");
        never.countDown();
    }

    @Test
    void aPendingRequestStopsAtTheEntryOfAnyMethod() throws Exception {
        Class<?> checked = sample(new StopCheckInstrumenter());
        StopCheck.request();
        assertThrows(StopCheck.Stopped.class, () -> call(checked, "depth", 3));
        InvocationTargetException e = assertThrows(InvocationTargetException.class,
                () -> checked.getConstructor(int.class).newInstance(3));
        assertInstanceOf(StopCheck.Stopped.class, e.getCause());
        StopCheck.withdraw();
        assertEquals(3, call(checked, "depth", 3));
    }

    @Test
    void theProbeClassIsAnEmptyLoadableClass() {
        Class<?> probe = define("REPL.$Probe", StopCheckInstrumenter.emptyClass("REPL.$Probe"));
        assertEquals("REPL.$Probe", probe.getName());
        assertEquals(Object.class, probe.getSuperclass());
        assertEquals(0, probe.getDeclaredMethods().length);
    }

    private static void assertInRange(long low, long high, long actual, String what) {
        assertTrue(actual >= low && actual <= high, what + ": " + actual + " checks, expected " + low + ".." + high);
    }
}
