package dev.rungbook.kernel;

import java.util.concurrent.atomic.AtomicInteger;

/**
 * The stop check that the kernel compiles into the code of every cell: {@link StopCheckInstrumenter} inserts a call
 * to {@link #poll()} at the entry of each method of a cell's classes and before each backward jump (the back edge of
 * every loop), so that a cell stops when the kernel asks, on any JDK, without {@code Thread.stop}.
 *
 * <p>The request is JVM-wide: while a session has asked for a stop, every instrumented method on every thread throws
 * at its next check (the cell's own thread, threads it started, pool threads running its lambdas). A kernel process
 * holds one session, so this is exactly "the cell code of this kernel". The request stays until the session that made
 * it starts its next cell, so that code which catches the error and carries on is stopped again at its next check.
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

    /** Number of sessions that currently ask for a stop; a plain volatile read on the hot path. */
    private static final AtomicInteger REQUESTS = new AtomicInteger();

    private StopCheck() {
    }

    /**
     * Returns at once unless a stop was asked for, and then throws {@link Stopped}. Called by instrumented cell code
     * only; cheap enough for every loop iteration (one volatile read).
     *
     * @throws Stopped when the kernel has asked to stop the running cell
     */
    public static void poll() {
        if (REQUESTS.get() != 0) {
            throw new Stopped();
        }
    }

    /** Adds one session's request (each session keeps track of whether it has one pending). */
    static void request() {
        REQUESTS.incrementAndGet();
    }

    /** Withdraws one session's request. */
    static void withdraw() {
        REQUESTS.decrementAndGet();
    }

    /** Whether any session currently asks for a stop. */
    static boolean requested() {
        return REQUESTS.get() != 0;
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
