package dev.rungbook.bench;

import dev.rungbook.quant.Quantizer;
import dev.rungbook.tensor.Tensor;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.ArrayList;
import java.util.List;
import java.util.Locale;
import java.util.Map;
import java.util.function.DoubleSupplier;
import java.util.function.Function;

/**
 * Forward passes of the sample networks ({@link ForwardSubject}) and the machine's multiply-add throughput, timed by
 * the benchmark thread's CPU time (and the wall clock) in one JVM, interleaved: each repetition runs every case once
 * in turn, the first {@code WARM} repetitions are dropped, and the median and minimum of the rest are reported.
 * Everything runs on the one benchmark thread: the forward passes are single-threaded, and so are the peaks it
 * measures (run it with {@code OPENBLAS_NUM_THREADS=1} so that the native sgemm is too; its worker threads' CPU time
 * would not be counted otherwise).
 *
 * <p>With {@code --before OLD.jar} the same forward passes of an older library version run in the same JVM: a class
 * loader takes every {@code dev.rungbook} class from {@code OLD.jar} (then from the benchmark jar, for
 * {@link ForwardSubject}) and everything else from the application class path. Cases of that version are suffixed
 * {@code Before}.
 *
 * <p>Peaks: {@code peakJavaFma} and {@code peakJavaInt32MulAdd} are plain loops over arrays in the level-1 cache
 * (each multiply-add also loads two values and stores one: what the JIT makes of a streaming loop);
 * {@code peakVectorFma} and {@code peakVectorInt32MulAdd} ({@link VectorPeaks}, with
 * {@code --add-modules jdk.incubator.vector}) keep their accumulators in registers, the arithmetic's real ceiling;
 * {@code peakSgemm} is the library's sgemm (native BLAS when it loads) on 512 x 512 x 512.
 *
 * <p>Output in JMH's JSON layout (score = median thread-CPU ms per call, mode {@code "cpu-time median"}), with the
 * minimum, the wall-clock median, the multiply-adds per call and the load average before and after, so that
 * {@code bench/summarize.py} reads it.
 *
 * <p>First, as a notebook would, the JVM quantizes a seeded 1024 x 1024 matrix once with each of {@link #QUANTIZERS}
 * (unless {@code --no-quantizers}): the Vector API keeps one receiver profile per method across the library, and a
 * quantizer kernel that touched a shape the forward passes rely on has slowed them 10-25x in such a JVM (measured
 * 2026-12-03 for NF4's former gathers, 2026-12-04 for the eight-lane level kernel's), which a JVM that ran only the
 * forward passes would not show. The JSON rows say {@code "quantizersFirst"}.
 *
 * <p>Usage: {@code java [--add-modules jdk.incubator.vector] -cp bench/target/benchmarks.jar
 * dev.rungbook.bench.ForwardCpuTime OUT.json [--before OLD.jar] [--reps N] [--no-quantizers]}.
 */
public final class ForwardCpuTime {
    private static final int WARM = 20;
    /** The specs run once before the forward passes (see the class comment). */
    static final List<String> QUANTIZERS = List.of("int8", "int4 per-group(1,128)", "nf4", "codebook16",
            "codebook32", "fp8-e4m3 per-channel(0)");
    private static final int LOOP = 1024;
    private static final int LOOP_REPS = 4096;

    private ForwardCpuTime() {
    }

    private record Case(String name, long macs, DoubleSupplier body) {
    }

    private static Path samples() {
        for (String p : new String[] {"sample-tensors", "../sample-tensors"}) {
            if (Files.isDirectory(Path.of(p))) {
                return Path.of(p).toAbsolutePath();
            }
        }
        throw new IllegalStateException("sample-tensors not found from " + Path.of("").toAbsolutePath());
    }

    @SuppressWarnings("unchecked")
    private static void addSubject(List<Case> cases, Function<String, DoubleSupplier> subject, Map<String, Long> macs,
            String suffix) {
        for (Map.Entry<String, Long> e : macs.entrySet()) {
            cases.add(new Case(e.getKey() + suffix, e.getValue(), subject.apply(e.getKey())));
        }
    }

    @SuppressWarnings("unchecked")
    public static void main(String[] args) throws Exception {
        if (args.length < 1) {
            System.err.println("usage: ForwardCpuTime OUT.json [--before OLD.jar] [--reps N] [--no-quantizers]");
            System.exit(2);
        }
        Path outFile = Path.of(args[0]);
        Path before = null;
        int reps = 61;
        boolean quantizersFirst = true;
        for (int i = 1; i < args.length; i++) {
            if (args[i].equals("--before")) {
                before = Path.of(args[++i]);
            } else if (args[i].equals("--no-quantizers")) {
                quantizersFirst = false;
            } else if (args[i].equals("--reps")) {
                reps = Integer.parseInt(args[++i]);
            } else {
                throw new IllegalArgumentException("unknown argument " + args[i]);
            }
        }
        if (quantizersFirst) {
            runQuantizers();
        }
        String loadStart = CpuTimeRuns.loadAverage();
        Path samples = samples();
        List<Case> cases = new ArrayList<>();
        ForwardSubject now = new ForwardSubject(samples);
        addSubject(cases, now, now.macs(), "");
        if (before != null) {
            ClassLoader old = CpuTimeRuns.olderLibrary(before, ForwardCpuTime.class);
            Object subject = old.loadClass(ForwardSubject.class.getName()).getConstructor(Path.class)
                    .newInstance(samples);
            if (subject.getClass().getClassLoader() != old) {
                throw new IllegalStateException("the older library's subject was not loaded from " + before);
            }
            Map<String, Long> macs = (Map<String, Long>) subject.getClass().getMethod("macs").invoke(subject);
            addSubject(cases, (Function<String, DoubleSupplier>) subject, macs, "Before");
        }
        float[] fx = new float[LOOP];
        float[] fy = new float[LOOP];
        int[] ix = new int[LOOP];
        int[] iy = new int[LOOP];
        for (int i = 0; i < LOOP; i++) {
            fx[i] = 1e-6f * (i % 13);
            ix[i] = i % 13 - 6;
        }
        float[] fm = {1.0000001f};
        int[] im = {3};
        long loopMacs = (long) LOOP * LOOP_REPS;
        cases.add(new Case("peakJavaFma", loopMacs, () -> {
            float a = fm[0];
            for (int r = 0; r < LOOP_REPS; r++) {
                for (int i = 0; i < LOOP; i++) {
                    fy[i] = Math.fma(fx[i], a, fy[i]);
                }
            }
            return fy[7];
        }));
        cases.add(new Case("peakJavaInt32MulAdd", loopMacs, () -> {
            int a = im[0]; // an array element, so that the JIT cannot turn the product into shifts
            for (int r = 0; r < LOOP_REPS; r++) {
                for (int i = 0; i < LOOP; i++) {
                    iy[i] += ix[i] * a;
                }
            }
            return iy[7];
        }));
        if (CpuTimeRuns.vectorModule()) {
            cases.add(new Case("peakVectorFma", VectorPeaks.floatMacs(), () -> VectorPeaks.floatFma(fx, fm[0])));
            cases.add(new Case("peakVectorInt32MulAdd", VectorPeaks.intMacs(),
                    () -> VectorPeaks.intMulAdd(ix, im[0])));
        }
        int g = 512;
        float[] ga = new float[g * g];
        float[] gb = new float[g * g];
        float[] gc = new float[g * g];
        for (int i = 0; i < ga.length; i++) {
            ga[i] = (i % 7) * 0.01f;
            gb[i] = (i % 5) * 0.02f;
        }
        dev.rungbook.internal.LinearAlgebra la = dev.rungbook.internal.LinearAlgebra.instance();
        cases.add(new Case("peakSgemm", (long) g * g * g, () -> {
            la.sgemm(false, false, g, g, g, ga, gb, gc);
            return gc[0];
        }));

        CpuTimeRuns.Timings times = CpuTimeRuns.interleaved(cases.stream().map(Case::body).toList(), WARM, reps);
        String loadEnd = CpuTimeRuns.loadAverage();
        String env = String.valueOf(System.getenv("OPENBLAS_NUM_THREADS"));
        List<String> rows = new ArrayList<>();
        for (int c = 0; c < cases.size(); c++) {
            double[] t = times.sortedCpu(c);
            double wallMedian = times.wallMedian(c);
            Case k = cases.get(c);
            double median = t[t.length / 2];
            System.out.printf(Locale.ROOT, "%-28s cpu median %8.3f ms, min %8.3f; wall median %8.3f  %7.2f G op/s%n",
                    k.name(), median, t[0], wallMedian, 2.0 * k.macs() / median / 1e6);
            rows.add(String.format(Locale.ROOT, "{\"benchmark\": \"dev.rungbook.bench.ForwardCpuTime.%s\", "
                    + "\"mode\": \"cpu-time median\", \"threads\": 1, \"primaryMetric\": {\"score\": %.4f, "
                    + "\"scoreUnit\": \"ms/op\", \"min\": %.4f, \"wallMedian\": %.4f, \"repetitions\": %d}, "
                    + "\"macs\": %d, \"loadStart\": \"%s\", \"loadEnd\": \"%s\", \"vectorModule\": %b, "
                    + "\"openblasThreads\": \"%s\", \"linearAlgebra\": \"%s\", \"before\": \"%s\", "
                    + "\"quantizersFirst\": %b}", k.name(), median, t[0], wallMedian, reps, k.macs(), loadStart,
                    loadEnd, CpuTimeRuns.vectorModule(), env, la.backend(),
                    before == null ? "" : before.getFileName(), quantizersFirst));
        }
        System.out.println("(checksum " + times.sink() + "; load " + loadStart + " -> " + loadEnd + "; vector module "
                + CpuTimeRuns.vectorModule() + "; OPENBLAS_NUM_THREADS=" + env + "; " + la.backend() + ")");
        CpuTimeRuns.writeRows(outFile, rows);
    }

    /** Quantizes a seeded 1024 x 1024 N(0, 1) matrix with each of {@link #QUANTIZERS}, a few times each. */
    private static void runQuantizers() {
        java.util.SplittableRandom r = new java.util.SplittableRandom(20261204);
        float[] v = new float[1024 * 1024];
        for (int i = 0; i < v.length; i++) {
            v[i] = (float) r.nextGaussian();
        }
        Tensor t = Tensor.of(v, 1024, 1024).withName("warm-up");
        double sink = 0;
        for (String spec : QUANTIZERS) {
            for (int k = 0; k < 3; k++) {
                sink += Quantizer.parse(spec).apply(t).error().sqnrDb();
            }
        }
        System.out.printf(Locale.ROOT, "quantized a 1024 x 1024 matrix first with %s (SQNR sum %.1f dB)%n",
                QUANTIZERS, sink);
    }
}
