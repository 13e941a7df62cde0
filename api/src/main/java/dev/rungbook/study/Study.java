package dev.rungbook.study;

import dev.rungbook.io.Checkpoint;
import dev.rungbook.metrics.ErrorReport;
import dev.rungbook.progress.OperationInterruptedException;
import dev.rungbook.progress.Progress;
import dev.rungbook.quant.Quantized;
import dev.rungbook.quant.Quantizer;
import dev.rungbook.tensor.Tensor;
import java.util.ArrayList;
import java.util.LinkedHashMap;
import java.util.List;
import java.util.Map;
import java.util.Objects;
import java.util.concurrent.CompletableFuture;
import java.util.concurrent.ExecutionException;
import java.util.concurrent.ExecutorService;
import java.util.concurrent.Executors;
import java.util.concurrent.Future;
import java.util.function.Predicate;
import java.util.function.Supplier;

/**
 * Runs quantizer specs over tensors and tabulates the result:
 *
 * <pre>{@code
 * Study.of(w1, w2).compare(Quantizer.linear(8), Quantizer.linear(4).perGroup(1, 128), Quantizer.nf4()).table();
 * }</pre>
 *
 * <p>Immutable; {@link #compare} does the work, tensor by tensor (specs in parallel), reporting each finished pair to
 * the {@link Progress} listener (task {@code "study"}) and stopping with an
 * {@link dev.rungbook.progress.OperationInterruptedException} when its thread is interrupted. A spec that does not fit
 * a tensor stops the study with the quantizer's error, which names both.
 */
public final class Study {
    private final Map<String, Supplier<Tensor>> tensors;
    private final Progress progress;

    private Study(Map<String, Supplier<Tensor>> tensors, Progress progress) {
        this.tensors = tensors;
        this.progress = progress;
    }

    /**
     * A study of the given tensors, labelled by their names ({@code tensor0}, {@code tensor1}, ... for unnamed
     * ones).
     *
     * @throws IllegalArgumentException if there are no tensors or two share a name
     */
    public static Study of(Tensor... tensors) {
        Map<String, Tensor> m = new LinkedHashMap<>();
        for (int i = 0; i < tensors.length; i++) {
            Tensor t = Objects.requireNonNull(tensors[i], "tensor " + i);
            String name = t.name() == null ? "tensor" + i : t.name();
            if (m.put(name, t) != null) {
                throw new IllegalArgumentException("two tensors of the study are named '" + name + "'");
            }
        }
        return of(m);
    }

    /**
     * A study of the given tensors in the map's iteration order, labelled by the keys.
     *
     * @throws IllegalArgumentException if the map is empty
     */
    public static Study of(Map<String, Tensor> tensors) {
        if (tensors.isEmpty()) {
            throw new IllegalArgumentException("a study needs at least one tensor");
        }
        Map<String, Supplier<Tensor>> m = new LinkedHashMap<>();
        tensors.forEach((k, v) -> {
            Tensor t = Objects.requireNonNull(v, "tensor '" + k + "'");
            m.put(Objects.requireNonNull(k, "tensor name"), () -> t);
        });
        return new Study(m, Progress.silent());
    }

    /**
     * A study of every tensor of a checkpoint, in file order, labelled by their names. Tensors are fetched one at a
     * time during {@link #compare} (and can be freed after their rows are done), so the checkpoint must stay open
     * until then. Narrow the set with {@link #filter}, e.g. {@code Study.of(ckpt).filter(n -> n.endsWith(".weight"))}.
     *
     * @throws IllegalArgumentException if the checkpoint holds no tensor
     */
    public static Study of(Checkpoint checkpoint) {
        Objects.requireNonNull(checkpoint, "checkpoint");
        Map<String, Supplier<Tensor>> m = new LinkedHashMap<>();
        for (String name : checkpoint.names()) {
            m.put(name, () -> checkpoint.tensor(name));
        }
        if (m.isEmpty()) {
            throw new IllegalArgumentException(checkpoint.path() + ": a study needs at least one tensor, the "
                    + "checkpoint holds none");
        }
        return new Study(m, Progress.silent());
    }

    /**
     * The same study restricted to the tensors whose names pass {@code keep}.
     *
     * @throws IllegalArgumentException if no tensor passes
     */
    public Study filter(Predicate<String> keep) {
        Map<String, Supplier<Tensor>> m = new LinkedHashMap<>();
        tensors.forEach((k, v) -> {
            if (keep.test(k)) {
                m.put(k, v);
            }
        });
        if (m.isEmpty()) {
            throw new IllegalArgumentException("no tensor of the study passes the filter; names: " + tensors.keySet());
        }
        return new Study(m, progress);
    }

    /** The same study reporting to {@code listener}. */
    public Study progress(Progress listener) {
        return new Study(tensors, Objects.requireNonNull(listener, "listener"));
    }

    /** The tensor names, in order. */
    public List<String> tensorNames() {
        return List.copyOf(tensors.keySet());
    }

    /**
     * Applies every spec to every tensor (tensor-major order) and collects one row per pair. Each tensor is read once
     * for all specs, and the statistics of the original that every error report needs (its value counts for the KL
     * divergence, see {@link ErrorReport#reference}) are taken once per tensor. With more than one spec, the specs
     * run in parallel on up to {@link Runtime#availableProcessors()} threads (the quantizers themselves are
     * single-threaded) fed from one queue of (tensor, spec) jobs: the next tensor is read and its specs start while
     * the last specs of the current one finish, with at most two tensors in memory at a time; a single spec runs on
     * the calling thread. Rows come out in tensor-major, spec order whatever finishes first. An interrupt of the
     * calling thread stops the running specs.
     *
     * @throws IllegalArgumentException if no spec is given, or a spec does not fit a tensor
     */
    public StudyResult compare(Quantizer... specs) {
        if (specs.length == 0) {
            throw new IllegalArgumentException("compare needs at least one quantizer");
        }
        for (Quantizer q : specs) {
            Objects.requireNonNull(q, "quantizer");
        }
        int threads = Math.min(specs.length, Runtime.getRuntime().availableProcessors());
        try {
            return threads > 1 ? parallel(specs, threads) : serial(specs);
        } finally {
            progress.finish("study");
        }
    }

    /** A tensor read and prepared as the reference of its error reports. */
    private record Prepared(String name, Tensor tensor, ErrorReport.Reference reference) {
    }

    private Prepared prepare(Map.Entry<String, Supplier<Tensor>> e) {
        Tensor t = e.getValue().get();
        return new Prepared(e.getKey(), t, ErrorReport.reference(t));
    }

    private StudyResult serial(Quantizer[] specs) {
        List<StudyResult.Row> rows = new ArrayList<>();
        long total = (long) tensors.size() * specs.length;
        for (Map.Entry<String, Supplier<Tensor>> e : tensors.entrySet()) {
            Progress.checkInterrupted("study");
            Prepared p = prepare(e);
            for (Quantizer q : specs) {
                Progress.checkInterrupted("study");
                report(rows, row(p, q), total);
            }
        }
        return new StudyResult(rows);
    }

    /** Tensors admitted at a time: the one finishing and the next. */
    private static final int TENSORS_IN_FLIGHT = 2;

    private StudyResult parallel(Quantizer[] specs, int threads) {
        ExecutorService pool = Executors.newFixedThreadPool(threads, r -> {
            Thread t = new Thread(r, "rungbook-study");
            t.setDaemon(true);
            return t;
        });
        // Per admitted tensor: its read first, then its spec jobs; dropped once its rows are in, so that the tensor
        // can be freed.
        List<List<CompletableFuture<?>>> admitted = new ArrayList<>();
        try {
            List<Map.Entry<String, Supplier<Tensor>>> entries = new ArrayList<>(tensors.entrySet());
            List<StudyResult.Row> rows = new ArrayList<>();
            long total = (long) entries.size() * specs.length;
            int next = 0;
            for (int i = 0; i < entries.size(); i++) {
                // Admit tensors up to the window. The pool's queue is first in, first out: a tensor's read (and
                // then its specs) queue behind the specs of the tensors before it, so a thread that runs out of
                // specs of tensor i moves on to tensor i + 1 instead of waiting for its partner.
                while (next < entries.size() && next < i + TENSORS_IN_FLIGHT) {
                    Progress.checkInterrupted("study");
                    Map.Entry<String, Supplier<Tensor>> e = entries.get(next++);
                    CompletableFuture<Prepared> prep = CompletableFuture.supplyAsync(() -> prepare(e), pool);
                    List<CompletableFuture<?>> jobs = new ArrayList<>();
                    jobs.add(prep);
                    for (Quantizer q : specs) {
                        jobs.add(prep.thenApplyAsync(p -> row(p, q), pool));
                    }
                    admitted.add(jobs);
                }
                List<CompletableFuture<?>> jobs = admitted.get(i);
                for (int j = 1; j < jobs.size(); j++) {
                    report(rows, (StudyResult.Row) await(jobs.get(j), admitted), total);
                }
                admitted.set(i, null);
            }
            return new StudyResult(rows);
        } finally {
            cancel(admitted);
            pool.shutdownNow(); // interrupts the specs still running
        }
    }

    private void report(List<StudyResult.Row> rows, StudyResult.Row r, long total) {
        rows.add(r);
        progress.update("study", rows.size(), total, r.metrics()[ErrorReport.METRICS.indexOf("mse")]);
    }

    private StudyResult.Row row(Prepared p, Quantizer q) {
        Quantized r = q.apply(p.tensor(), progress);
        // The same values as r.error(), with the original's value counts shared by the specs of the tensor.
        ErrorReport err = ErrorReport.of(p.reference(), r.dequantized());
        return new StudyResult.Row(p.name(), q.label(), p.tensor().size(), r.bitsPerWeight(), r.bytes(),
                err.values());
    }

    private static void cancel(List<List<CompletableFuture<?>>> admitted) {
        for (List<CompletableFuture<?>> jobs : admitted) {
            if (jobs != null) {
                jobs.forEach(f -> f.cancel(true));
            }
        }
    }

    /** The result of {@code f}; its failure rethrown as it was; on interrupt, every pending job is cancelled. */
    private static Object await(Future<?> f, List<List<CompletableFuture<?>>> all) {
        try {
            return f.get();
        } catch (InterruptedException e) {
            cancel(all);
            Thread.currentThread().interrupt();
            throw new OperationInterruptedException("study");
        } catch (ExecutionException e) {
            cancel(all);
            Throwable c = e.getCause();
            if (c instanceof RuntimeException re) {
                throw re;
            }
            if (c instanceof Error err) {
                throw err;
            }
            throw new IllegalStateException(c);
        }
    }
}
