package dev.rungbook.kernel;

import java.lang.reflect.Field;
import java.util.Map;
import java.util.concurrent.TimeUnit;
import java.util.logging.Level;
import java.util.logging.Logger;
import jdk.jshell.execution.LocalExecutionControl;
import jdk.jshell.spi.ExecutionControl;
import jdk.jshell.spi.ExecutionControlProvider;
import jdk.jshell.spi.ExecutionEnv;

/**
 * JShell's in-process execution engine, extended so that the kernel can read the actual object held by a variable
 * (not only its {@code toString}) and can stop a running cell on every JDK from 17 on. Only the public
 * {@code jdk.jshell.spi} / {@code jdk.jshell.execution} contract is used.
 *
 * <h2>Stopping a cell</h2>
 * Every class a cell defines is rewritten before JShell loads it ({@link StopCheckInstrumenter}): each of its methods
 * calls {@link StopCheck#poll()} on entry and before every backward branch. {@link #stop()} raises this session's stop
 * request and marks the threads of the cells' thread group that are running, so that cell code throws
 * {@link StopCheck.Stopped} at its next check (see {@link StopCheck} for who is stopped when), then waits up to
 * {@link #SELF_STOP_MILLIS} for the cell to leave; only if it is still running then (it is inside a JDK or library
 * method, which is not rewritten) the JDK's own stop is used, where it exists.
 *
 * <p>What is guaranteed: a loop or a recursion written in a cell (in the cell's statements, methods, classes and
 * lambdas, on the cell's thread or any other) ends at its next back edge or method call after the request, without
 * {@code Thread.stop}, on JDK 17, 21 and 25 alike; the cell ends with the error {@code Interrupted}, none of its later
 * snippets run, and the next cell runs normally. What is not: a JDK or library method that loops without checking for
 * interruption (the kernel interrupts the cell's threads before it asks for a stop) is stopped only where the JDK's
 * stop can do it, by {@code Thread.stop} up to JDK 19; from JDK 20 {@code Thread.stop} is unsupported and such a call
 * runs to its end, after which cell code stops at its next check (JShell's own checks on newer JDKs such as 25 act
 * at the same places as ours). Cell code that catches {@link Error} and loops on inside the same {@code try} block is
 * stopped again at each check, so it ends only where a check lies outside such a {@code try}.
 *
 * <p>The checks are on unless the JVM runs with {@code -Drungbook.stopChecks=false} (for diagnosis), or unless the
 * cells' class loader resolves {@link StopCheck} to another class than the kernel's (checked once, logged); without
 * them a stop relies on the JDK alone. The request is withdrawn by {@link #clearStop()} when the next cell starts.
 *
 * <p>{@code redefine} is rewritten the same way as {@code load}, although the JDK's local engine does not support
 * redefinition (JShell then loads a replacement class).
 */
final class ValueCapturingExecutionControl extends LocalExecutionControl {
    /** System property that turns the stop checks off when set to {@code false}. */
    static final String STOP_CHECKS_PROPERTY = "rungbook.stopChecks";
    /** How long {@link #stop()} waits for the stop checks to end the cell before it uses the JDK's stop. */
    static final long SELF_STOP_MILLIS = 300;
    /** An empty class loaded into JShell's class loader once, to find which loader cell classes get. */
    private static final String PROBE = "REPL.$RungbookStopProbe";
    private static final Logger LOG = Logger.getLogger(ValueCapturingExecutionControl.class.getName());

    private final StopCheckInstrumenter instrumenter = new StopCheckInstrumenter();
    private final Object stopLock = new Object();
    private volatile boolean checks;
    private volatile boolean jdkStop = true;
    private volatile boolean stopAsked;
    private boolean probed;
    private boolean failureLogged;
    /** Calls into cell code in progress (guarded by {@code stopLock}). */
    private int clientCalls;
    /** Whether this session's request is counted in {@link StopCheck} (guarded by {@code stopLock}). */
    private boolean requesting;
    /** The thread that last called into cell code, and its thread group (guarded by {@code stopLock}). */
    private Thread invoker;
    private ThreadGroup cellGroup;
    private boolean captureOnly;
    private Object captured;

    ValueCapturingExecutionControl() {
        checks = !"false".equalsIgnoreCase(System.getProperty(STOP_CHECKS_PROPERTY, "true").strip());
        if (!checks) {
            LOG.info("stop checks are off (-D" + STOP_CHECKS_PROPERTY + "=false): stopping a cell relies on the JDK");
        }
    }

    /**
     * Reads a variable's current object through {@code JShell.varValue}: {@code jshell.varValue(v)} ends up in
     * {@link #varValue(String, String)} with the wrapper class name that only the engine knows.
     */
    synchronized Object capture(Runnable varValueCall) {
        captureOnly = true;
        captured = null;
        try {
            varValueCall.run();
            return captured;
        } finally {
            captureOnly = false;
            captured = null;
        }
    }

    @Override
    public String varValue(String className, String varName)
            throws RunException, EngineTerminationException, InternalException {
        if (!captureOnly) {
            return super.varValue(className, varName);
        }
        try {
            Class<?> type = findClass(className);
            Field field = type.getDeclaredField(varName);
            field.setAccessible(true);
            captured = field.get(null);
            return "";
        } catch (ReflectiveOperationException | LinkageError e) {
            throw new InternalException("cannot read variable " + varName + " of " + className + ": " + e);
        }
    }

    @Override
    public void load(ClassBytecodes[] cbcs)
            throws ClassInstallException, NotImplementedException, EngineTerminationException {
        super.load(instrumented(cbcs));
    }

    @Override
    public void redefine(ClassBytecodes[] cbcs)
            throws ClassInstallException, NotImplementedException, EngineTerminationException {
        super.redefine(instrumented(cbcs));
    }

    private ClassBytecodes[] instrumented(ClassBytecodes[] cbcs)
            throws ClassInstallException, NotImplementedException, EngineTerminationException {
        if (!checksUsable()) {
            return cbcs;
        }
        ClassBytecodes[] out = new ClassBytecodes[cbcs.length];
        for (int i = 0; i < cbcs.length; i++) {
            try {
                out[i] = new ClassBytecodes(cbcs[i].name(), instrumenter.instrument(cbcs[i].bytecodes()));
            } catch (RuntimeException e) {
                // e.g. a class file version newer than the ASM release knows: load the class as it is.
                if (!failureLogged) {
                    failureLogged = true;
                    LOG.log(Level.WARNING, "cannot insert stop checks into " + cbcs[i].name() + " (" + e
                            + "); such classes are loaded without them");
                }
                out[i] = cbcs[i];
            }
        }
        return out;
    }

    /** Whether the checks are on; the first call checks that cell classes link to this JVM's {@link StopCheck}. */
    private boolean checksUsable() throws ClassInstallException, NotImplementedException, EngineTerminationException {
        if (checks && !probed) {
            probed = true;
            checks = cellClassesSeeStopCheck();
        }
        return checks;
    }

    private boolean cellClassesSeeStopCheck()
            throws ClassInstallException, NotImplementedException, EngineTerminationException {
        super.load(new ClassBytecodes[] {new ClassBytecodes(PROBE, StopCheckInstrumenter.emptyClass(PROBE))});
        try {
            ClassLoader cells = findClass(PROBE).getClassLoader();
            // The JVM resolves a cell class's reference to StopCheck through this same loadClass call.
            if (Class.forName(StopCheck.class.getName(), false, cells) == StopCheck.class) {
                return true;
            }
            LOG.warning("cell classes see another copy of " + StopCheck.class.getName()
                    + "; stop checks are off and stopping a cell relies on the JDK");
        } catch (ClassNotFoundException | LinkageError e) {
            LOG.warning("cell classes cannot see " + StopCheck.class.getName() + " (" + e
                    + "); stop checks are off and stopping a cell relies on the JDK");
        }
        return false;
    }

    /**
     * Stops the running cell: raises the stop request for the cell's checks, waits up to {@link #SELF_STOP_MILLIS}
     * for the cell to leave, then (if it is still running) uses the JDK's own stop unless that is switched off. On a
     * JDK without {@code Thread.stop} the JDK's failure to stop is logged, not thrown, when the checks are on.
     */
    @Override
    public void stop() throws EngineTerminationException, InternalException {
        stopAsked = true;
        if (checks) {
            synchronized (stopLock) {
                if (!requesting) {
                    requesting = true;
                    StopCheck.request();
                }
                markRunningCellThreads();
                long deadline = System.nanoTime() + TimeUnit.MILLISECONDS.toNanos(SELF_STOP_MILLIS);
                try {
                    for (long left = SELF_STOP_MILLIS; clientCalls > 0 && left > 0;
                            left = TimeUnit.NANOSECONDS.toMillis(deadline - System.nanoTime())) {
                        stopLock.wait(left);
                    }
                } catch (InterruptedException e) {
                    Thread.currentThread().interrupt();
                }
                if (clientCalls == 0) {
                    return;
                }
            }
        }
        if (!jdkStop) {
            return;
        }
        try {
            super.stop();
        } catch (UnsupportedOperationException e) {
            if (!checks) {
                throw e;
            }
            LOG.log(Level.FINE, "the JDK cannot stop the cell (" + e + "); cell code stops at its checks, a JDK or "
                    + "library method that ignores interrupts runs to its end");
        }
    }

    /**
     * Marks the threads of the cells' thread group (that of the thread which runs the cells; JShell's snippet thread
     * and the threads cells start belong to it) that are running now, except the one that hands cells to JShell.
     */
    private void markRunningCellThreads() {
        ThreadGroup group = cellGroup;
        if (group == null) {
            return;
        }
        Thread[] threads;
        int n;
        do {
            threads = new Thread[group.activeCount() + 8];
            n = group.enumerate(threads, true);
        } while (n == threads.length);
        for (int i = 0; i < n; i++) {
            Thread t = threads[i];
            if (t != invoker && t != Thread.currentThread() && t.getState() == Thread.State.RUNNABLE) {
                StopCheck.mark(t);
            }
        }
    }

    /**
     * Clears this session's stop request and drops the marks of threads that are no longer running; called when a
     * cell starts.
     */
    void clearStop() {
        synchronized (stopLock) {
            stopAsked = false;
            if (requesting) {
                requesting = false;
                StopCheck.withdraw();
            }
            StopCheck.dropIdleMarks();
        }
    }

    /** Whether {@link #stop()} was called since the last {@link #clearStop()}. */
    boolean stopAsked() {
        return stopAsked;
    }

    /** Whether cell classes get stop checks (known for sure once the first class was loaded). */
    boolean stopChecksOn() {
        return checks;
    }

    /**
     * Lets {@link #stop()} use the JDK's stop or not. With {@code false} a stop relies on the checks alone, as on a
     * JDK that has no {@code Thread.stop} and no checks of its own (JDK 20 and 21); for tests.
     */
    void useJdkStop(boolean use) {
        jdkStop = use;
    }

    @Override
    protected void clientCodeEnter() {
        super.clientCodeEnter();
        synchronized (stopLock) {
            clientCalls++;
            invoker = Thread.currentThread();
            cellGroup = invoker.getThreadGroup();
        }
    }

    @Override
    protected void clientCodeLeave() {
        synchronized (stopLock) {
            clientCalls--;
            stopLock.notifyAll();
        }
        super.clientCodeLeave();
    }

    @Override
    public void close() {
        clearStop();
        super.close();
    }

    /** Provides {@link ValueCapturingExecutionControl}; the created instance is handed to {@code onCreate}. */
    static final class Provider implements ExecutionControlProvider {
        private volatile ValueCapturingExecutionControl created;

        @Override
        public String name() {
            return "rungbook-local";
        }

        @Override
        public ExecutionControl generate(ExecutionEnv env, Map<String, String> parameters) {
            ValueCapturingExecutionControl control = new ValueCapturingExecutionControl();
            created = control;
            return control;
        }

        ValueCapturingExecutionControl created() {
            return created;
        }
    }
}
