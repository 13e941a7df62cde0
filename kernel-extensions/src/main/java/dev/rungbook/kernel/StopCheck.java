package dev.rungbook.kernel;

import java.util.Set;
import java.util.concurrent.ConcurrentHashMap;
import java.util.concurrent.atomic.AtomicInteger;

/**
 * The stop check that the kernel compiles into the code of every cell: {@link StopCheckInstrumenter} inserts a call
 * to {@link #poll()} at the entry of each method of a cell's classes and before each backward jump (the back edge of
 * every loop), so that a cell stops when the kernel asks, on any JDK, without {@code Thread.stop}.
 *
 * <p>A stop acts in two ways. While a session asks for a stop, every instrumented method on every thread throws at
 * its next check (the cell's own thread, threads it started, pool threads running its lambdas); a kernel process
 * holds one session, so this is exactly "the cell code of this kernel". The request stays until that session starts
 * its next cell, so that code which catches the error and carries on is stopped again at its next check. In
 * addition, each thread that was running cell work when the stop came ({@link #mark}) owes one stop: it throws at its
 * next check even when the next cell has already started, which covers a thread the scheduler did not run while the
 * request was up. Marks of threads that have gone idle or died by the next cell are dropped ({@link #dropIdleMarks}),
 * so that a thread pool made by an earlier cell serves later cells normally.
 *
 * <p>Cell classes are defined by JShell's class loader, whose parent is the loader of the kernel's classes; this
 * class is public so that they can link to it ({@link ValueCapturingExecutionControl} checks this before it
 * instruments anything).
 */
public final class StopCheck {
    /** Internal name of this class, as the instrumented bytecode refers to it. */
    static final String OWNER = "dev/rungbook/kernel/StopCheck";
    /** Name of the check method ({@code static void poll()}). */
    static final String METHOD = "poll";

    /** Number of sessions that currently ask for a stop. */
    private static final AtomicInteger REQUESTS = new AtomicInteger();
    /** Threads that owe one stop. */
    private static final Set<Thread> MARKED = ConcurrentHashMap.newKeySet();
    /** {@code REQUESTS} plus the size of {@code MARKED}: zero on the hot path, where it is the only read. */
    private static final AtomicInteger PENDING = new AtomicInteger();

    private StopCheck() {
    }

    /**
     * Returns at once unless a stop is pending, and then throws {@link Stopped} when it applies to this thread.
     * Called by instrumented cell code only; cheap enough for every loop iteration (one volatile read when no stop is
     * pending).
     *
     * @throws Stopped when the kernel has asked to stop the running cell
     */
    public static void poll() {
        if (PENDING.get() != 0) {
            stopIfAsked();
        }
    }

    private static void stopIfAsked() {
        boolean owed = MARKED.remove(Thread.currentThread());
        if (owed) {
            PENDING.decrementAndGet();
        }
        if (owed || REQUESTS.get() != 0) {
            throw new Stopped();
        }
    }

    /** Adds one session's request (each session keeps track of whether it has one pending). */
    static void request() {
        REQUESTS.incrementAndGet();
        PENDING.incrementAndGet();
    }

    /** Withdraws one session's request. */
    static void withdraw() {
        REQUESTS.decrementAndGet();
        PENDING.decrementAndGet();
    }

    /** Whether any session currently asks for a stop. */
    static boolean requested() {
        return REQUESTS.get() != 0;
    }

    /** Makes {@code thread} owe one stop, thrown at its next check. */
    static void mark(Thread thread) {
        if (MARKED.add(thread)) {
            PENDING.incrementAndGet();
        }
    }

    /** Drops the marks of threads that have ended or are no longer running (waiting for work, sleeping, blocked). */
    static void dropIdleMarks() {
        for (Thread t : MARKED) {
            if (t.getState() != Thread.State.RUNNABLE && MARKED.remove(t)) {
                PENDING.decrementAndGet();
            }
        }
    }

    /** Number of threads that owe a stop. */
    static int marked() {
        return MARKED.size();
    }

    /**
     * What a stopped cell throws from its stop checks. An {@link Error}, so that {@code catch (Exception e)} in a cell
     * does not swallow it; the kernel reports it as the error {@code Interrupted}.
     */
    static final class Stopped extends Error {
        private static final long serialVersionUID = 1L;

        Stopped() {
            super("the cell was stopped");
        }
    }
}
