package dev.rungbook.render;

import java.lang.reflect.Method;
import java.lang.reflect.Modifier;
import java.util.ArrayDeque;
import java.util.Arrays;
import java.util.Deque;
import java.util.HashSet;
import java.util.Map;
import java.util.Set;
import java.util.concurrent.ConcurrentHashMap;
import java.util.function.Function;
import org.knowm.xchart.internal.chartpart.Chart;
import tech.tablesaw.api.Table;

/**
 * Renderers keyed by class: one small function per type, turning a value into a {@link MimeBundle}. The most
 * specific registered class (then interface) of a value wins; values of unregistered types that have a public
 * no-argument {@code toTable()} returning a Tablesaw {@link Table} render as that table; everything else renders as
 * {@code text/plain} of its {@code toString()}.
 *
 * <p>All standard renderers are registered in {@link #standard()}; a Rungbook result type gets its renderer by one
 * line there, e.g. {@code .register(ErrorReport.class, ResultRenderers::errorReport)}.
 */
public final class Renderers {
    /** Longest {@code text/plain} produced by the fallback; longer {@code toString()}s are cut with a notice. */
    static final int MAX_PLAIN = 200_000;

    private final Map<Class<?>, Function<Object, MimeBundle>> byType = new ConcurrentHashMap<>();

    /** An empty registry (only the fallbacks). */
    public Renderers() {
    }

    /** The registry the kernel uses: Tablesaw tables, XChart charts, arrays, and the fallbacks. */
    public static Renderers standard() {
        return new Renderers()
                .register(Table.class, TableRenderer::render)
                .register(Chart.class, ChartRenderer::render)
                .register(dev.rungbook.metrics.TensorStats.class, ResultRenderers::tensorStats)
                .register(dev.rungbook.metrics.ErrorReport.class, ResultRenderers::errorReport)
                .register(dev.rungbook.quant.Quantized.class, ResultRenderers::quantized)
                .register(dev.rungbook.study.StudyResult.class, ResultRenderers::studyResult)
                .register(double[].class, a -> MimeBundle.text(Arrays.toString(a)))
                .register(float[].class, a -> MimeBundle.text(Arrays.toString(a)))
                .register(int[].class, a -> MimeBundle.text(Arrays.toString(a)))
                .register(long[].class, a -> MimeBundle.text(Arrays.toString(a)))
                .register(Object[].class, a -> MimeBundle.text(Arrays.deepToString(a)));
    }

    /** Registers (or replaces) the renderer of {@code type} and its subtypes; returns this registry. */
    @SuppressWarnings("unchecked")
    public <T> Renderers register(Class<T> type, Function<? super T, MimeBundle> renderer) {
        byType.put(type, v -> renderer.apply((T) v));
        return this;
    }

    /** Renders {@code value}; a failing renderer falls back to {@code text/plain} with the failure noted. */
    public MimeBundle render(Object value) {
        if (value == null) {
            return MimeBundle.text("null");
        }
        Function<Object, MimeBundle> f = find(value.getClass());
        if (f != null) {
            try {
                return f.apply(value);
            } catch (RuntimeException e) {
                return MimeBundle.text(plain(value) + "\n(rich rendering failed: " + e + ")");
            }
        }
        Table table = asTable(value);
        if (table != null) {
            return TableRenderer.render(table);
        }
        return MimeBundle.text(plain(value));
    }

    private Function<Object, MimeBundle> find(Class<?> type) {
        for (Class<?> c = type; c != null; c = c.getSuperclass()) {
            Function<Object, MimeBundle> f = byType.get(c);
            if (f != null) {
                return f;
            }
        }
        Deque<Class<?>> todo = new ArrayDeque<>();
        Set<Class<?>> seen = new HashSet<>();
        for (Class<?> c = type; c != null; c = c.getSuperclass()) {
            todo.addAll(Arrays.asList(c.getInterfaces()));
        }
        while (!todo.isEmpty()) {
            Class<?> i = todo.poll();
            if (!seen.add(i)) {
                continue;
            }
            Function<Object, MimeBundle> f = byType.get(i);
            if (f != null) {
                return f;
            }
            todo.addAll(Arrays.asList(i.getInterfaces()));
        }
        return null;
    }

    /** The result of a public no-argument {@code toTable()} returning a {@link Table}, or null. */
    static Table asTable(Object value) {
        try {
            Method m = value.getClass().getMethod("toTable");
            if (Modifier.isStatic(m.getModifiers()) || !Table.class.isAssignableFrom(m.getReturnType())
                    || !Modifier.isPublic(m.getDeclaringClass().getModifiers())) {
                return null;
            }
            return (Table) m.invoke(value);
        } catch (ReflectiveOperationException | RuntimeException e) {
            return null;
        }
    }

    static String plain(Object value) {
        String s;
        try {
            s = String.valueOf(value);
        } catch (RuntimeException e) {
            s = value.getClass().getName() + " (toString failed: " + e + ")";
        }
        if (s.length() > MAX_PLAIN) {
            s = s.substring(0, MAX_PLAIN) + "\n... (" + (s.length() - MAX_PLAIN) + " more characters not shown)";
        }
        return s;
    }
}
