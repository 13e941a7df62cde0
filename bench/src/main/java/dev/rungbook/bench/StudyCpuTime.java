package dev.rungbook.bench;

import dev.rungbook.io.Checkpoint;
import dev.rungbook.quant.Quantizer;
import dev.rungbook.study.Study;
import java.io.IOException;
import java.lang.management.ManagementFactory;
import java.lang.management.OperatingSystemMXBean;
import java.lang.management.ThreadInfo;
import java.lang.management.ThreadMXBean;
import java.nio.charset.StandardCharsets;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.ArrayList;
import java.util.Arrays;
import java.util.List;
import java.util.Map;
import java.util.concurrent.ConcurrentHashMap;
import java.util.Locale;

/**
 * {@link StudyBench}'s two studies (one spec, four specs, same generated bf16 checkpoint) timed by the process's
 * CPU time next to the wall clock, for a machine shared with other work. A study runs its specs on several threads,
 * so the thread CPU time of {@link QuantizeCpuTime} would miss most of the work; the process's CPU time counts all
 * of it (plus a little JVM housekeeping) and does not grow while the process waits for a core. The two studies run
 * interleaved, the first {@code WARM} rounds are dropped, and the medians are written in JMH's JSON layout with the
 * system load average at the start and end of the run, so that the wall-clock figures can be read against it.
 *
 * <p>The four-spec figures also show whether both cores were kept busy: a sampler reads the CPU time of the study's
 * worker threads every 20 ms, and the run reports each worker's share; equal shares mean the job queue gave every
 * worker work until the end (on a loaded machine the wall clock cannot show that). On an otherwise idle 2-core
 * machine the wall clock of the four-spec study is then about half its CPU time.
 *
 * <p>Usage: {@code java -Xmx1g -cp bench/target/benchmarks.jar dev.rungbook.bench.StudyCpuTime OUT.json [MIB]
 * [ROUNDS]}; it links only to public API, so it also runs against an older library jar placed first on the class
 * path.
 */
public final class StudyCpuTime {
    private static final int WARM = 1;

    private StudyCpuTime() {
    }

    public static void main(String[] args) throws IOException {
        int mib = args.length > 1 ? Integer.parseInt(args[1]) : 256;
        int rounds = args.length > 2 ? Integer.parseInt(args[2]) : 3;
        StudyBench setup = new StudyBench();
        setup.mib = mib;
        setup.makeFile();
        Path file = Path.of(System.getProperty("rungbook.bench.dir", "target/bench-data"))
                .resolve("study-" + mib + "MiB.bf16.safetensors");
        OperatingSystemMXBean os = ManagementFactory.getOperatingSystemMXBean();
        com.sun.management.OperatingSystemMXBean cpu = (com.sun.management.OperatingSystemMXBean) os;
        double loadBefore = os.getSystemLoadAverage();
        String[] names = {"oneSpec", "fourSpecs"};
        Quantizer[][] specs = {{StudyBench.SPECS[0]}, StudyBench.SPECS};
        double[][] cpuMs = new double[2][rounds];
        double[][] wallMs = new double[2][rounds];
        double[][] workers = new double[rounds][];
        long rows = 0;
        WorkerSampler sampler = new WorkerSampler();
        for (int r = 0; r < WARM + rounds; r++) {
            for (int s = 0; s < 2; s++) {
                sampler.reset();
                long c0 = cpu.getProcessCpuTime();
                long t0 = System.nanoTime();
                try (Checkpoint c = Checkpoint.open(file)) {
                    rows += Study.of(c).compare(specs[s]).rowCount();
                }
                double wall = (System.nanoTime() - t0) / 1e6;
                double used = (cpu.getProcessCpuTime() - c0) / 1e6;
                double[] w = sampler.workerMs();
                System.out.printf(Locale.ROOT, "%s %-10s wall %8.0f ms  cpu %8.0f ms  workers %s ms  (load %.2f)%n",
                        r < WARM ? "warm " : "round", names[s], wall, used, Arrays.toString(w),
                        os.getSystemLoadAverage());
                if (r >= WARM) {
                    cpuMs[s][r - WARM] = used;
                    wallMs[s][r - WARM] = wall;
                    if (s == 1) {
                        workers[r - WARM] = w;
                    }
                }
            }
        }
        double loadAfter = os.getSystemLoadAverage();
        List<String> out = new ArrayList<>();
        double[] cpuMed = new double[2];
        double[] wallMed = new double[2];
        for (int s = 0; s < 2; s++) {
            double[] c = cpuMs[s].clone();
            double[] w = wallMs[s].clone();
            Arrays.sort(c);
            Arrays.sort(w);
            cpuMed[s] = c[c.length / 2];
            wallMed[s] = w[w.length / 2];
            StringBuilder shares = new StringBuilder();
            if (s == 1) {
                // per round: the smallest worker CPU time over the largest (1 = evenly busy)
                shares.append(", \"workerBalance\": [");
                for (int r = 0; r < rounds; r++) {
                    double[] ws = workers[r];
                    double lo = ws.length == 0 ? 0 : ws[0];
                    double hi = ws.length == 0 ? 0 : ws[ws.length - 1];
                    shares.append(r == 0 ? "" : ", ").append(String.format(Locale.ROOT, "%.3f",
                            hi > 0 ? lo / hi : 0));
                }
                shares.append("], \"workers\": ").append(workers[0].length);
            }
            out.add(String.format(Locale.ROOT, "{\"benchmark\": \"dev.rungbook.bench.StudyCpuTime.%s\", "
                    + "\"mode\": \"process-cpu-time median\", \"params\": {\"mib\": \"%d\"}, \"primaryMetric\": "
                    + "{\"score\": %.1f, \"scoreUnit\": \"ms/op\", \"min\": %.1f, \"max\": %.1f, \"repetitions\": %d}, "
                    + "\"wallMedianMs\": %.1f, \"wallMinMs\": %.1f, \"loadAverageStart\": %.2f, "
                    + "\"loadAverageEnd\": %.2f%s}", names[s], mib, cpuMed[s], c[0], c[c.length - 1], rounds,
                    wallMed[s], w[0], loadBefore, loadAfter, shares));
        }
        System.out.printf(Locale.ROOT, "medians: cpu 4/1 = %.2f, wall 4/1 = %.2f (rows %d)%n", cpuMed[1] / cpuMed[0],
                wallMed[1] / wallMed[0], rows);
        Files.writeString(Path.of(args[0]), "[\n" + String.join(",\n", out) + "\n]\n", StandardCharsets.UTF_8);
    }

    /** Polls the CPU time of the live threads named {@code rungbook-study}, keeping the last reading of each. */
    private static final class WorkerSampler {
        private final Map<Long, Long> last = new ConcurrentHashMap<>();

        WorkerSampler() {
            ThreadMXBean bean = ManagementFactory.getThreadMXBean();
            Thread t = new Thread(() -> {
                while (true) {
                    for (ThreadInfo info : bean.getThreadInfo(bean.getAllThreadIds())) {
                        if (info != null && info.getThreadName().equals("rungbook-study")) {
                            long ns = bean.getThreadCpuTime(info.getThreadId());
                            if (ns > 0) {
                                last.merge(info.getThreadId(), ns, Math::max);
                            }
                        }
                    }
                    try {
                        Thread.sleep(20);
                    } catch (InterruptedException e) {
                        return;
                    }
                }
            }, "worker-sampler");
            t.setDaemon(true);
            t.start();
        }

        void reset() {
            last.clear();
        }

        /** Each worker's CPU ms since {@link #reset}, ascending (up to 20 ms of each worker's end is missed). */
        double[] workerMs() {
            return last.values().stream().mapToDouble(ns -> ns / 1e6).sorted().toArray();
        }
    }
}
