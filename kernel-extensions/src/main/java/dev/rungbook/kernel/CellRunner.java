package dev.rungbook.kernel;

import dev.rungbook.render.Notebook;
import dev.rungbook.render.OutputSink;
import java.util.ArrayList;
import java.util.List;
import java.util.concurrent.ExecutionException;
import java.util.concurrent.ExecutorService;
import java.util.concurrent.Executors;
import java.util.concurrent.Future;
import java.util.concurrent.ScheduledExecutorService;
import java.util.concurrent.TimeUnit;
import java.util.concurrent.atomic.AtomicLong;
import java.util.function.Supplier;
import java.util.logging.Level;
import java.util.logging.Logger;

/**
 * Runs cells one at a time on a dedicated thread (in its own thread group) and stops them on request.
 *
 * <p>Interrupting a cell: every thread of the cells' thread group except the runner's own is interrupted at once, so
 * blocking calls and library loops that check {@code Thread.interrupted()} / {@code Progress.checkInterrupted} end
 * promptly; if the cell is still running after {@link #STOP_GRACE_MILLIS}, the session is stopped
 * ({@link CellEvaluator#stop()}): the stop checks compiled into every cell class end loops and recursion of cell code
 * on any JDK (see {@link ValueCapturingExecutionControl}), and the JDK's own stop is tried after that for a cell still
 * inside a JDK or library call ({@code Thread.stop} on JDK 17; unsupported from JDK 20). A stopped cell ends with the
 * error {@value CellEvaluator#STOPPED_NAME}. A delayed stop never reaches the next cell: it is dropped once its cell
 * has ended.
 */
final class CellRunner implements AutoCloseable {
    /** Time a cell has to react to an interrupt before JShell's stop is used. */
    static final long STOP_GRACE_MILLIS = 1000;
    private static final Logger LOG = Logger.getLogger(CellRunner.class.getName());

    private final ThreadGroup group = new ThreadGroup("rungbook-cells");
    private final ExecutorService executor;
    private final ScheduledExecutorService timer;
    private final java.util.concurrent.CompletableFuture<CellEvaluator> evaluator =
            new java.util.concurrent.CompletableFuture<>();
    private final Supplier<CellEvaluator> factory;
    private final java.util.concurrent.atomic.AtomicBoolean started = new java.util.concurrent.atomic.AtomicBoolean();
    private final AtomicLong cellSerial = new AtomicLong();
    /** Orders a delayed stop against the end of its cell (see {@link #stop(long)}). */
    private final Object stopLock = new Object();
    private volatile Thread runnerThread;
    private volatile long runningCell = -1;
    private volatile boolean interruptRequested;
    private volatile boolean stopUsed;

    /**
     * A runner whose session is created by {@link #start()} (or by the first use).
     *
     * @param factory creates the evaluator; runs on the cell thread
     * @param timer schedules the delayed stop
     */
    CellRunner(Supplier<CellEvaluator> factory, ScheduledExecutorService timer) {
        this.timer = timer;
        this.executor = Executors.newSingleThreadExecutor(r -> {
            Thread t = new Thread(group, r, "rungbook-cell");
            t.setDaemon(true);
            return t;
        });
        this.factory = factory;
    }

    /** Starts creating the session on the cell thread (idempotent; the first cell also starts it). */
    void start() {
        if (started.compareAndSet(false, true)) {
            executor.execute(() -> {
                runnerThread = Thread.currentThread();
                try {
                    evaluator.complete(factory.get());
                } catch (RuntimeException | Error e) {
                    evaluator.completeExceptionally(e);
                }
            });
        }
    }

    /** The session (starts it if needed and waits for its creation). */
    CellEvaluator evaluator() {
        start();
        try {
            return evaluator.get();
        } catch (InterruptedException e) {
            Thread.currentThread().interrupt();
            throw new IllegalStateException("interrupted while the JShell session was starting", e);
        } catch (ExecutionException e) {
            throw new IllegalStateException("the JShell session could not start: " + e.getCause(), e.getCause());
        }
    }

    /** Runs a cell with {@code sink} bound as its output; waits for it to end. */
    CellResult run(String code, int executionCount, OutputSink sink) {
        CellEvaluator ev = evaluator();
        long serial = cellSerial.incrementAndGet();
        interruptRequested = false;
        stopUsed = false;
        ev.clearStop();
        Future<CellResult> f = executor.submit(() -> {
            Thread.interrupted();
            OutputSink before = Notebook.bind(sink);
            try {
                return ev.evalKeepingStop(code, executionCount);
            } finally {
                Notebook.bind(before);
                Thread.interrupted();
            }
        });
        runningCell = serial;
        try {
            CellResult r = waitFor(f);
            return interruptRequested ? asInterrupted(r) : r;
        } finally {
            synchronized (stopLock) {
                runningCell = -1;
            }
        }
    }

    private CellResult waitFor(Future<CellResult> f) {
        boolean interrupted = false;
        try {
            while (true) {
                try {
                    return f.get();
                } catch (InterruptedException e) {
                    interrupted = true;
                    interrupt();
                } catch (ExecutionException e) {
                    Throwable t = e.getCause();
                    return new CellResult.RuntimeFailure("KernelError", String.valueOf(t),
                            new Tracebacks(id -> null).format(Tracebacks.of(t)), false);
                }
            }
        } finally {
            if (interrupted) {
                Thread.currentThread().interrupt();
            }
        }
    }

    private CellResult asInterrupted(CellResult r) {
        if (r instanceof CellResult.RuntimeFailure f) {
            boolean named = f.errorName().contains("Interrupt");
            String message = f.message().isEmpty() ? "the cell was interrupted" : f.message();
            return new CellResult.RuntimeFailure(named ? f.errorName() : CellEvaluator.STOPPED_NAME,
                    named ? message : "the cell was interrupted (" + f.errorName() + (f.message().isEmpty() ? ""
                            : ": " + f.message()) + ")", f.traceback(), true);
        }
        if (stopUsed) {
            return new CellResult.RuntimeFailure(CellEvaluator.STOPPED_NAME, CellEvaluator.STOPPED_MESSAGE,
                    List.of(CellEvaluator.STOPPED_NAME + ": " + CellEvaluator.STOPPED_MESSAGE), true);
        }
        return r;
    }

    /** Asks the running cell (if any) to stop; returns at once. A second request stops without grace. */
    void interrupt() {
        long serial = runningCell;
        if (serial < 0) {
            return;
        }
        boolean repeated = interruptRequested;
        interruptRequested = true;
        for (Thread t : cellThreads()) {
            if (t != runnerThread) {
                t.interrupt();
            }
        }
        if (repeated) {
            stop(serial);
        } else {
            timer.schedule(() -> stop(serial), STOP_GRACE_MILLIS, TimeUnit.MILLISECONDS);
        }
    }

    private void stop(long serial) {
        // Under the lock, so that a stop for a cell that is ending cannot set the request after the next cell began.
        synchronized (stopLock) {
            if (runningCell != serial) {
                return;
            }
            stopUsed = true;
            try {
                evaluator().stop();
            } catch (RuntimeException | LinkageError e) {
                LOG.log(Level.WARNING, "JShell could not stop the running cell (" + e + "); a JDK or library call "
                        + "that ignores interrupts keeps running until it returns or the kernel is restarted");
            }
        }
    }

    private List<Thread> cellThreads() {
        Thread[] threads = new Thread[group.activeCount() + 16];
        int n = group.enumerate(threads, true);
        List<Thread> out = new ArrayList<>(n);
        for (int i = 0; i < n; i++) {
            out.add(threads[i]);
        }
        return out;
    }

    @Override
    public void close() {
        try {
            if (evaluator.isDone()) {
                evaluator().close();
            }
        } catch (RuntimeException e) {
            LOG.log(Level.FINE, "closing the JShell session failed", e);
        }
        executor.shutdownNow();
    }
}
