package dev.rungbook.bench;

import dev.rungbook.quant.Quantizer;
import dev.rungbook.tensor.Tensor;
import java.io.IOException;
import java.lang.management.ManagementFactory;
import java.lang.management.ThreadMXBean;
import java.nio.charset.StandardCharsets;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.ArrayList;
import java.util.Arrays;
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
 * <p>Usage: {@code java -Xmx6g [--add-modules jdk.incubator.vector] -cp bench/target/benchmarks.jar
 * dev.rungbook.bench.QuantizeCpuTime OUT.json [REPETITIONS]}.
 */
public final class QuantizeCpuTime {
    private static final int WARM = 3;

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

    public static void main(String[] args) throws IOException {
        int reps = args.length > 1 ? Integer.parseInt(args[1]) : 9;
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
        List<Case> cases = List.of(
                new Case("plainCopy", () -> {
                    System.arraycopy(w, 0, copy, 0, w.length);
                    return copy[copy.length - 1];
                }),
                new Case("fusedPerChannelInt8", () -> QuantizeBench.fusedSqnr(w, scales, zps, codes, dq, e, s)),
                new Case("apiPerChannelInt8",
                        () -> Quantizer.linear(8).asymmetric().perChannel(0).apply(matrix).error().sqnrDb()),
                new Case("apiPerChannelInt8AllMetrics",
                        () -> Quantizer.linear(8).asymmetric().perChannel(0).apply(matrix).error().values()[8]),
                new Case("apiPerGroupInt4", () -> Quantizer.linear(4).perGroup(1, 128).apply(matrix).error().sqnrDb()),
                new Case("apiNf4", () -> Quantizer.nf4().apply(matrix).error().sqnrDb()),
                new Case("apiCodebook16On2To24", () -> Quantizer.codebook(16).apply(large).error().sqnrDb()));
        ThreadMXBean bean = ManagementFactory.getThreadMXBean();
        double[][] times = new double[cases.size()][reps];
        double sink = 0;
        for (int rep = 0; rep < WARM + reps; rep++) {
            for (int c = 0; c < cases.size(); c++) {
                long t0 = bean.getCurrentThreadCpuTime();
                sink += cases.get(c).body().getAsDouble();
                double ms = (bean.getCurrentThreadCpuTime() - t0) / 1e6;
                if (rep >= WARM) {
                    times[c][rep - WARM] = ms;
                }
            }
        }
        List<String> rows = new ArrayList<>();
        for (int c = 0; c < cases.size(); c++) {
            double[] t = times[c].clone();
            Arrays.sort(t);
            double median = t[t.length / 2];
            System.out.printf(Locale.ROOT, "%-30s %10.1f ms (cpu, median of %d; min %.1f, max %.1f)%n",
                    cases.get(c).name(), median, reps, t[0], t[t.length - 1]);
            rows.add(String.format(Locale.ROOT, "{\"benchmark\": \"dev.rungbook.bench.QuantizeCpuTime.%s\", "
                    + "\"mode\": \"cpu-time median\", \"primaryMetric\": {\"score\": %.3f, \"scoreUnit\": \"ms/op\", "
                    + "\"min\": %.3f, \"max\": %.3f, \"repetitions\": %d}}", cases.get(c).name(), median, t[0],
                    t[t.length - 1], reps));
        }
        System.out.println("(checksum " + sink + ", vector API reductions: " + vectorised() + ")");
        Files.writeString(Path.of(args[0]), "[\n" + String.join(",\n", rows) + "\n]\n", StandardCharsets.UTF_8);
    }
}
