package dev.rungbook.bench;

import dev.rungbook.internal.LinearAlgebra;
import dev.rungbook.quant.Quantized;
import dev.rungbook.quant.Quantizer;
import dev.rungbook.round.AdaptiveRounding;
import dev.rungbook.round.Calibration;
import dev.rungbook.round.RoundingRun;
import dev.rungbook.tensor.Tensor;
import java.io.IOException;
import java.io.PrintWriter;
import java.nio.charset.StandardCharsets;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.SplittableRandom;

/**
 * Writes the loss and undecided-share curve of one seeded adaptive-rounding run, so that two implementations (or two
 * linear-algebra backends) can be compared with {@code bench/adaptive/compare.py}. Inputs as in
 * {@link LearnedRoundingBench}: a {@code rows x 512} weight of sd {@code 1/sqrt(512)}, 1024 correlated samples,
 * int4 per channel, published defaults with the given number of iterations, seed 0.
 *
 * <p>Usage: {@code java -cp bench/target/benchmarks.jar dev.rungbook.bench.AdaptiveCurve ROWS ITERATIONS OUT
 * [published]}; with {@code published} the flip search that follows the published method is off. The file has one
 * line {@code loss undecided} per iteration, then {@code mse <weight MSE of the result>}; the wall-clock and process
 * CPU seconds of the run are printed, then the output error {@code mean_x ||W x - W~ x||^2} over the calibration
 * samples of the result and of rounding to nearest.
 */
public final class AdaptiveCurve {
    private AdaptiveCurve() {
    }

    public static void main(String[] args) throws IOException {
        int rows = Integer.parseInt(args[0]);
        int iterations = Integer.parseInt(args[1]);
        Path out = Path.of(args[2]);
        Tensor w = Tensor.of(gaussian(3, rows * 512, 1 / Math.sqrt(512)), rows, 512).withName("small.weight");
        Calibration cal = Calibration.of(Tensor.of(inputs(4, 1024, 512), 1024, 512));
        RoundingRun[] run = new RoundingRun[1];
        com.sun.management.OperatingSystemMXBean os = (com.sun.management.OperatingSystemMXBean)
                java.lang.management.ManagementFactory.getOperatingSystemMXBean();
        long c0 = os.getProcessCpuTime();
        long t0 = System.nanoTime();
        boolean published = args.length > 3 && args[3].equals("published");
        Quantized q = Quantizer.linear(4).perChannel(0).rounding(AdaptiveRounding.of(cal).iterations(iterations)
                .polish(!published).onFinish(r -> run[0] = r)).apply(w);
        double s = (System.nanoTime() - t0) / 1e9;
        double cpu = (os.getProcessCpuTime() - c0) / 1e9;
        // Process CPU time counts every thread (BLAS, fork-join workers) but not the waits for a core.
        System.out.printf("%d x 512, %d iterations: %.2f s wall, %.2f s process CPU (%s)%n", rows, iterations, s, cpu,
                run[0].backend());
        Quantized near = Quantizer.linear(4).perChannel(0).apply(w);
        System.out.printf("output error %.6g (rounding to nearest %.6g)%s%n", outputError(w, q, cal),
                outputError(w, near, cal), published ? ", published method alone" : ", with the flip search");
        StringBuilder b = new StringBuilder();
        double[] loss = run[0].lossHistory();
        double[] undecided = run[0].undecidedHistory();
        for (int i = 0; i < loss.length; i++) {
            b.append(loss[i]).append(' ').append(undecided[i]).append('\n');
        }
        b.append("mse ").append(q.error().mse()).append('\n');
        try (PrintWriter p = new PrintWriter(Files.newBufferedWriter(out, StandardCharsets.UTF_8))) {
            p.print(b);
        }
    }

    /** {@code mean_x ||W x - W~ x||^2} over the calibration samples, in double from float32 products. */
    static double outputError(Tensor w, Quantized q, Calibration cal) {
        int rows = w.shape()[0];
        int cols = w.shape()[1];
        float[] d = w.toFloatArray();
        float[] wq = q.dequantized().toFloatArray();
        for (int i = 0; i < d.length; i++) {
            d[i] -= wq[i];
        }
        int n = cal.samples();
        float[] y = new float[n * rows];
        LinearAlgebra.instance().sgemm(false, true, n, rows, cols, cal.inputs().toFloatArray(), d, y);
        double s = 0;
        for (float v : y) {
            s += (double) v * v;
        }
        return s / n;
    }

    static float[] gaussian(long seed, int n, double sd) {
        SplittableRandom r = new SplittableRandom(seed);
        float[] v = new float[n];
        for (int i = 0; i < n; i++) {
            double u1 = 1 - r.nextDouble();
            double u2 = r.nextDouble();
            v[i] = (float) (sd * Math.sqrt(-2 * Math.log(u1)) * Math.cos(2 * Math.PI * u2));
        }
        return v;
    }

    static float[] inputs(long seed, int n, int in) {
        int k = 64;
        float[] z = gaussian(seed, n * k, 1.0);
        float[] mix = gaussian(seed + 1, k * in, 1.0 / Math.sqrt(k));
        float[] noise = gaussian(seed + 2, n * in, 0.1);
        float[] x = new float[n * in];
        LinearAlgebra.instance().sgemm(false, false, n, in, k, z, mix, x);
        for (int i = 0; i < x.length; i++) {
            x[i] += noise[i];
        }
        return x;
    }
}
