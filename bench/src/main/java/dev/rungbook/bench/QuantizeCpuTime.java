package dev.rungbook.bench;

import dev.rungbook.quant.Quantizer;
import dev.rungbook.tensor.Tensor;
import java.io.IOException;
import java.nio.file.Path;
import java.util.ArrayList;
import java.util.List;
import java.util.Locale;
import java.util.SplittableRandom;
import java.util.function.DoubleSupplier;

/**
 * {@link QuantizeBench}'s cases timed by the thread's CPU time instead of the wall clock, for machines shared with
 * other work: the benchmark thread's CPU seconds do not count the time it waits for a core, which on a loaded 2-core
 * machine swings JMH's wall-clock scores by more than their own size. Every case runs single-threaded. The cases
 * run interleaved (one repetition of each in turn), the first {@code WARM} repetitions are dropped, and the median of
 * the rest is reported, in JMH's JSON layout (score in ms/op, mode {@code "cpu-time median"}) so that
 * {@code bench/summarize.py} reads it like a JMH result.
 *
 * <p>The {@code apply*} cases time {@code apply} alone (codes, scales and dequantized values, no error report), the
 * figure to hold against the fused kernel's. With a third argument, the cases the library's fused segment kernels
 * serve (per-group int4, NF4, FP8 per channel) also run with the kernels switched off (system property
 * {@code rungbook.segmentKernels=false}, set around each call), interleaved with the rest, and their medians go to
 * that file under the same names: the general per-segment path, timed in the same run. {@code studyOneSpec} and
 * {@code studyFourSpecs} do one tensor's share of {@link StudyBench}'s study (every metric per spec) on one thread,
 * so that the four-to-one ratio is measured in CPU time, free of the wall clock's sharing.
 *
 * <p>Usage: {@code java -Xmx6g [--add-modules jdk.incubator.vector] -cp bench/target/benchmarks.jar
 * dev.rungbook.bench.QuantizeCpuTime OUT.json [REPETITIONS [GENERAL-PATH.json]]}; with
 * {@code -Drungbook.bench.cases=NAME,NAME} only the named cases run (to see which case changes another's figure);
 * with {@code -Drungbook.bench.forks=N} the cases run in N fresh JVMs one after the other and each file gets the
 * median of the forks' medians ({@link CpuTimeRuns#inForks}; {@code bench/run} runs 3).
 */
public final class QuantizeCpuTime {
    private static final int WARM = 3;
    /** The library's switch for its fused segment kernels (see the engine); "false" turns them off. */
    private static final String KERNELS = "rungbook.segmentKernels";
    /** A comma-separated list of case names: only those run (all of them without it). */
    private static final String ONLY = "rungbook.bench.cases";

    private QuantizeCpuTime() {
    }

    private record Case(String name, DoubleSupplier body) {
    }

    /** Whether the library runs its reductions on the Vector API ("n/a" for a library version without the option). */
    private static String vectorised() {
        try {
            return String.valueOf(Class.forName("dev.rungbook.internal.Lanes").getMethod("vectorised").invoke(null));
        } catch (ReflectiveOperationException e) {
            return "n/a";
        }
    }

    public static void main(String[] args) throws IOException, InterruptedException {
        int forks = CpuTimeRuns.forks();
        if (forks > 1) {
            CpuTimeRuns.inForks(QuantizeCpuTime.class, args, forks, 0, 2);
            return;
        }
        int reps = args.length > 1 ? Integer.parseInt(args[1]) : 9;
        Path before = args.length > 2 ? Path.of(args[2]) : null;
        int n = QuantizeBench.N;
        SplittableRandom r = new SplittableRandom(2);
        float[] w = new float[n * n];
        for (int row = 0; row < n; row++) {
            double range = Math.exp(r.nextDouble(-3, 1));
            for (int c = 0; c < n; c++) {
                w[row * n + c] = (float) (range * r.nextGaussian());
            }
        }
        Tensor matrix = Tensor.of(w, n, n);
        float[] big = new float[1 << 24];
        for (int i = 0; i < big.length; i++) {
            big[i] = (float) r.nextGaussian();
        }
        Tensor large = Tensor.of(big, big.length);
        float[] copy = new float[w.length];
        float[] scales = new float[n];
        int[] zps = new int[n];
        byte[] codes = new byte[w.length];
        float[] dq = new float[w.length];
        double[] e = new double[n];
        double[] s = new double[n];
        float[] gScales = new float[n * n / QuantizeBench.NF4_BLOCK];
        double[] gErr = new double[gScales.length];
        double[] gSig = new double[gScales.length];
        List<Case> every = List.of(
                new Case("plainCopy", () -> {
                    System.arraycopy(w, 0, copy, 0, w.length);
                    return copy[copy.length - 1];
                }),
                new Case("fusedPerChannelInt8", () -> QuantizeBench.fusedSqnr(w, scales, zps, codes, dq, e, s)),
                new Case("fusedPerGroupInt4",
                        () -> QuantizeBench.fusedGroupsSqnr(w, gScales, codes, dq, gErr, gSig, false)),
                new Case("fusedNf4", () -> QuantizeBench.fusedGroupsSqnr(w, gScales, codes, dq, gErr, gSig, true)),
                new Case("apiPerChannelInt8",
                        () -> Quantizer.linear(8).asymmetric().perChannel(0).apply(matrix).error().sqnrDb()),
                new Case("apiPerChannelInt8AllMetrics",
                        () -> Quantizer.linear(8).asymmetric().perChannel(0).apply(matrix).error().values()[8]),
                new Case("apiPerGroupInt4", () -> Quantizer.linear(4).perGroup(1, 128).apply(matrix).error().sqnrDb()),
                new Case("apiNf4", () -> Quantizer.nf4().apply(matrix).error().sqnrDb()),
                new Case("apiCodebook16On2To24", () -> Quantizer.codebook(16).apply(large).error().sqnrDb()),
                new Case("apiFp8PerChannel", () -> QuantizeBench.FP8.apply(matrix).error().sqnrDb()),
                new Case("applyPerChannelInt8", () -> QuantizeBench.quantizeOnly(QuantizeBench.INT8, matrix)),
                new Case("applyPerGroupInt4", () -> QuantizeBench.quantizeOnly(QuantizeBench.INT4_G128, matrix)),
                new Case("applyNf4", () -> QuantizeBench.quantizeOnly(Quantizer.nf4(), matrix)),
                new Case("applyFp8PerChannel", () -> QuantizeBench.quantizeOnly(QuantizeBench.FP8, matrix)),
                new Case("studyOneSpec", () -> everyMetric(matrix, StudyBench.SPECS[0])),
                new Case("studyFourSpecs", () -> everyMetric(matrix, StudyBench.SPECS)));
        // The cases the segment kernels serve, again with the kernels off (the general per-segment path), timed
        // interleaved with the rest when a second output file is given.
        List<Case> cases = every;
        List<String> generalNames = before == null ? List.of() : List.of("apiPerGroupInt4", "apiNf4",
                "apiFp8PerChannel", "applyPerGroupInt4", "applyNf4", "applyFp8PerChannel", "studyFourSpecs");
        String only = System.getProperty(ONLY);
        if (only != null) {
            List<String> names = List.of(only.split(","));
            List<String> unknown = names.stream().filter(x -> every.stream().noneMatch(c -> c.name().equals(x)))
                    .toList();
            if (!unknown.isEmpty()) {
                throw new IllegalArgumentException(ONLY + ": no case named " + unknown + "; the cases are "
                        + every.stream().map(Case::name).toList());
            }
            cases = cases.stream().filter(c -> names.contains(c.name())).toList();
            generalNames = generalNames.stream().filter(names::contains).toList();
        }
        List<Case> all = new ArrayList<>(cases);
        for (String name : generalNames) {
            Case c = every.stream().filter(x -> x.name().equals(name)).findFirst().orElseThrow();
            all.add(new Case(name, () -> {
                System.setProperty(KERNELS, "false");
                try {
                    return c.body().getAsDouble();
                } finally {
                    System.clearProperty(KERNELS);
                }
            }));
        }
        CpuTimeRuns.Timings times = CpuTimeRuns.interleaved(all.stream().map(Case::body).toList(), WARM, reps);
        List<String> rows = new ArrayList<>();
        List<String> generalRows = new ArrayList<>();
        for (int c = 0; c < all.size(); c++) {
            double[] t = times.sortedCpu(c);
            double median = t[t.length / 2];
            boolean general = c >= cases.size();
            System.out.printf(Locale.ROOT, "%-30s %10.1f ms (cpu, median of %d; min %.1f, max %.1f)%n",
                    all.get(c).name() + (general ? " (general path)" : ""), median, reps, t[0], t[t.length - 1]);
            (general ? generalRows : rows).add(String.format(Locale.ROOT, "{\"benchmark\": "
                    + "\"dev.rungbook.bench.QuantizeCpuTime.%s\", \"mode\": \"cpu-time median\", \"primaryMetric\": "
                    + "{\"score\": %.3f, \"scoreUnit\": \"ms/op\", \"min\": %.3f, \"max\": %.3f, \"repetitions\": %d}}",
                    all.get(c).name(), median, t[0], t[t.length - 1], reps));
        }
        System.out.println("(checksum " + times.sink() + ", vector API reductions: " + vectorised() + ")");
        CpuTimeRuns.writeRows(Path.of(args[0]), rows);
        if (before != null) {
            CpuTimeRuns.writeRows(before, generalRows);
        }
    }

    /**
     * What a study does per tensor and spec, one spec after the other on this thread: {@code apply}, then every
     * metric of the error report (the KL divergence of histograms too), as {@code StudyBench}'s four specs.
     */
    private static double everyMetric(Tensor t, Quantizer... specs) {
        double sum = 0;
        for (Quantizer q : specs) {
            sum += q.apply(t).error().values()[0];
        }
        return sum;
    }
}
