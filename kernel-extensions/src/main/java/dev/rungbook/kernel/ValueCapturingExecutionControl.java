package dev.rungbook.kernel;

import java.lang.reflect.Field;
import java.util.Map;
import jdk.jshell.execution.LocalExecutionControl;
import jdk.jshell.spi.ExecutionControl;
import jdk.jshell.spi.ExecutionControlProvider;
import jdk.jshell.spi.ExecutionEnv;

/**
 * JShell's in-process execution engine, extended so that the kernel can read the actual object held by a variable
 * (not only its {@code toString}). The JDK's own {@link LocalExecutionControl} is kept for running and stopping
 * snippets: on JDK 17 its stop uses {@code Thread.stop}; on newer JDKs it instruments snippet bytecode with stop
 * checks. Only the public {@code jdk.jshell.spi} contract is used.
 */
final class ValueCapturingExecutionControl extends LocalExecutionControl {
    private boolean captureOnly;
    private Object captured;

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
