package dev.rungbook.bench;

import dev.rungbook.internal.LinearAlgebra;
import dev.rungbook.quant.Quantizer;
import dev.rungbook.round.AdaptiveRounding;
import dev.rungbook.round.Calibration;
import dev.rungbook.round.ErrorFeedbackRounding;
import dev.rungbook.round.RoundingRun;
import dev.rungbook.tensor.Tensor;
import java.util.SplittableRandom;
import java.util.concurrent.TimeUnit;
import org.openjdk.jmh.annotations.Benchmark;
import org.openjdk.jmh.annotations.BenchmarkMode;
import org.openjdk.jmh.annotations.Fork;
import org.openjdk.jmh.annotations.Level;
import org.openjdk.jmh.annotations.Measurement;
import org.openjdk.jmh.annotations.Mode;
import org.openjdk.jmh.annotations.OutputTimeUnit;
import org.openjdk.jmh.annotations.Param;
import org.openjdk.jmh.annotations.Scope;
import org.openjdk.jmh.annotations.Setup;
import org.openjdk.jmh.annotations.State;
import org.openjdk.jmh.annotations.Warmup;

/**
 * Learned rounding at the sizes, with the machine's float32 matrix-multiply peak measured in the same run:
 * error-feedback rounding of a 4096 x 4096 layer with 2048 calibration samples, per-group 128, int4; adaptive
 * rounding of a 512 x 512 layer with 1024 samples at the published defaults (10,000 iterations, batch 32); and a
 * 2048^3 sgemm. {@code backend} selects native BLAS or the pure-Java path (a fresh JVM per value, so the choice
 * holds from the first call). Run with {@code java -jar bench/target/benchmarks.jar LearnedRoundingBench}; each
 * benchmark prints its GFLOP/s and backend.
 */
@State(Scope.Benchmark)
@BenchmarkMode(Mode.SingleShotTime)
@OutputTimeUnit(TimeUnit.SECONDS)
@Fork(1)
@Warmup(iterations = 0)
@Measurement(iterations = 1)
public class LearnedRoundingBench {
    /** {@code native} (system BLAS when it loads) or {@code java} (forced pure Java). */
    @Param({"native", "java"})
    public String backend;

    private Tensor bigWeight;
    private Calibration bigCalibration;
    private Tensor smallWeight;
    private Calibration smallCalibration;
    private float[] a;
    private float[] b;
    private float[] c;

    private static float[] gaussian(long seed, int n, double sd) {
        return AdaptiveCurve.gaussian(seed, n, sd);
    }

    /** Inputs with 64 shared factors, so the features are correlated as real activations are. */
    private static float[] inputs(long seed, int n, int in) {
        return AdaptiveCurve.inputs(seed, n, in);
    }

    @Setup(Level.Trial)
    public void setUp() {
        System.setProperty("rungbook.blas", backend.equals("java") ? "java" : "auto");
        System.out.println("\nlinear algebra: " + LinearAlgebra.instance().backend());
        bigWeight = Tensor.of(gaussian(1, 4096 * 4096, 1 / 64.0), 4096, 4096).withName("big.weight");
        bigCalibration = Calibration.of(Tensor.of(inputs(2, 2048, 4096), 2048, 4096));
        smallWeight = Tensor.of(gaussian(3, 512 * 512, 1 / Math.sqrt(512)), 512, 512).withName("small.weight");
        smallCalibration = Calibration.of(Tensor.of(inputs(4, 1024, 512), 1024, 512));
        a = gaussian(5, 2048 * 2048, 1);
        b = gaussian(6, 2048 * 2048, 1);
        c = new float[2048 * 2048];
    }

    /** float32 2048 x 2048 x 2048 product: the peak the other figures compare with. */
    @Benchmark
    public float sgemmPeak() {
        long t = System.nanoTime();
        LinearAlgebra.instance().sgemm(false, false, 2048, 2048, 2048, a, b, c);
        double s = (System.nanoTime() - t) / 1e9;
        System.out.printf("%nsgemm 2048: %.2f s, %.1f GFLOP/s (%s)%n", s, 2.0 * 2048 * 2048 * 2048 / s / 1e9,
                LinearAlgebra.instance().backend());
        return c[0];
    }

    /** Error-feedback rounding, 4096 x 4096, 2048 samples, int4 per group of 128 along the input axis. */
    @Benchmark
    public Object errorFeedback4096() {
        RoundingRun[] run = new RoundingRun[1];
        long t = System.nanoTime();
        Object q = Quantizer.linear(4).perGroup(1, 128)
                .rounding(ErrorFeedbackRounding.of(bigCalibration).onFinish(r -> run[0] = r)).apply(bigWeight);
        double s = (System.nanoTime() - t) / 1e9;
        // H = X^T X: 2 N in^2; lazy updates about out * in^2; factorisations about in^3 (double).
        double flops = 2.0 * 2048 * 4096 * 4096 + 4096.0 * 4096 * 4096 + 4096.0 * 4096 * 4096;
        System.out.printf("%nerror feedback 4096x4096: %.2f s, about %.1f GFLOP/s (%s)%n", s, flops / s / 1e9,
                run[0].backend());
        return q;
    }

    /** Adaptive rounding, 512 x 512, 1024 samples, published defaults. */
    @Benchmark
    public Object adaptive512() {
        RoundingRun[] run = new RoundingRun[1];
        long t = System.nanoTime();
        Object q = Quantizer.linear(4).perChannel(0)
                .rounding(AdaptiveRounding.of(smallCalibration).onFinish(r -> run[0] = r)).apply(smallWeight);
        double s = (System.nanoTime() - t) / 1e9;
        // Per iteration two products of 32 x 512 x 512.
        double flops = 10_000 * 2 * 2.0 * 32 * 512 * 512;
        System.out.printf("%nadaptive 512x512: %.2f s, products at %.1f GFLOP/s (%s)%n", s, flops / s / 1e9,
                run[0].backend());
        return q;
    }
}
