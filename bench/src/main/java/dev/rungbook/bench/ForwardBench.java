package dev.rungbook.bench;

import dev.rungbook.internal.LinearAlgebra;
import dev.rungbook.io.Checkpoint;
import dev.rungbook.nn.Dataset;
import dev.rungbook.nn.IntegerNetwork;
import dev.rungbook.nn.Network;
import dev.rungbook.nn.NetworkQuantization;
import dev.rungbook.nn.SimulatedNetwork;
import dev.rungbook.tensor.Tensor;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.HashMap;
import java.util.Map;
import java.util.concurrent.TimeUnit;
import org.openjdk.jmh.annotations.Benchmark;
import org.openjdk.jmh.annotations.BenchmarkMode;
import org.openjdk.jmh.annotations.Fork;
import org.openjdk.jmh.annotations.Level;
import org.openjdk.jmh.annotations.Measurement;
import org.openjdk.jmh.annotations.Mode;
import org.openjdk.jmh.annotations.OutputTimeUnit;
import org.openjdk.jmh.annotations.Scope;
import org.openjdk.jmh.annotations.Setup;
import org.openjdk.jmh.annotations.State;
import org.openjdk.jmh.annotations.Warmup;

/**
 * Float and integer-only forward passes of the sample classifier ({@code fc1 [256,72] -> ReLU -> fc2 [128,256] ->
 * ReLU -> fc3 [5,128]}) on a batch of 512 validation samples, with the machine's multiply-add throughput measured in
 * the same run: a float32 1024^3 product through the library's linear algebra (native BLAS when it loads), a Java
 * float FMA loop and a Java int32 multiply-add loop over L1-resident arrays (what the JIT makes of each arithmetic).
 * One forward pass is {@code 512 * (72*256 + 256*128 + 128*5) = 26.5M} multiply-adds; {@code bench/summarize.py}
 * turns the times into GFLOP/s and GOP/s (2 operations per multiply-add) and shares of the peaks. Single-threaded
 * Java (the sgemm may use every core). Sample-time mode: on a shared machine the fastest samples (p0) and the
 * median tell apart the code's speed and the machine's load; the summary reports both.
 */
@State(Scope.Benchmark)
@BenchmarkMode(Mode.SampleTime)
@OutputTimeUnit(TimeUnit.MILLISECONDS)
@Fork(1)
@Warmup(iterations = 3, time = 1)
@Measurement(iterations = 5, time = 1)
public class ForwardBench {
    /** Samples per batch. */
    public static final int BATCH = 512;
    private static final int LOOP = 1024;
    private static final int REPS = 4096;

    private Network net;
    private SimulatedNetwork sim;
    private IntegerNetwork integer;
    private IntegerNetwork integerSingle;
    private Tensor batch;
    private float[] ga;
    private float[] gb;
    private float[] gc;
    private float[] fx;
    private float[] fy;
    private int[] ix;
    private int[] iy;
    private int multiplier = 3;
    private float fmultiplier = 1.0000001f;

    private static Path samples() {
        for (String p : new String[] {"sample-tensors", "../sample-tensors"}) {
            if (Files.isDirectory(Path.of(p))) {
                return Path.of(p);
            }
        }
        throw new IllegalStateException("sample-tensors not found from " + Path.of("").toAbsolutePath());
    }

    @Setup(Level.Trial)
    public void setUp() {
        Path dir = samples();
        Map<String, Tensor> t = new HashMap<>();
        try (Checkpoint c = Checkpoint.open(dir.resolve("conveyor-mlp.f32.safetensors"))) {
            c.tensors().forEach((k, v) -> t.put(k, Tensor.of(v.toFloatArray(), v.shape()).withName(k)));
        }
        net = Network.mlp(t, "fc1", "fc2", "fc3");
        Dataset cal = Dataset.load(dir.resolve("conveyor-calibration.npz"));
        Dataset val = Dataset.load(dir.resolve("conveyor-validation.npz"));
        float[] x = new float[BATCH * 72];
        System.arraycopy(val.inputs().toFloatArray(), 0, x, 0, x.length);
        batch = Tensor.of(x, BATCH, 72);
        sim = NetworkQuantization.of(net).calibrate(cal);
        integer = IntegerNetwork.of(sim);
        integerSingle = integer.requantization(IntegerNetwork.Requantization.SINGLE_ROUNDING);
        ga = new float[1024 * 1024];
        gb = new float[1024 * 1024];
        gc = new float[1024 * 1024];
        for (int i = 0; i < ga.length; i++) {
            ga[i] = (i % 7) * 0.01f;
            gb[i] = (i % 5) * 0.02f;
        }
        fx = new float[LOOP];
        fy = new float[LOOP];
        ix = new int[LOOP];
        iy = new int[LOOP];
        for (int i = 0; i < LOOP; i++) {
            fx[i] = 1e-6f * (i % 13);
            ix[i] = i % 13 - 6;
        }
        System.out.println("\nlinear algebra: " + LinearAlgebra.instance().backend());
    }

    /** The float forward pass (Network.forward) on 512 samples. */
    @Benchmark
    public Tensor floatForward() {
        return net.forward(batch);
    }

    /** The integer-only forward pass (input quantization, int32 accumulation, published requantization). */
    @Benchmark
    public int[] integerForward() {
        return integer.forwardCodes(batch);
    }

    /** The same with single-rounding requantization. */
    @Benchmark
    public int[] integerForwardSingleRounding() {
        return integerSingle.forwardCodes(batch);
    }

    /** The simulated (fake-quant) forward pass, for comparison. */
    @Benchmark
    public Tensor simulatedForward() {
        return sim.forward(batch);
    }

    /** float32 1024 x 1024 x 1024 product through the library's linear algebra: 2^30 multiply-adds. */
    @Benchmark
    public float peakSgemm() {
        LinearAlgebra.instance().sgemm(false, false, 1024, 1024, 1024, ga, gb, gc);
        return gc[0];
    }

    /** Java float FMA loop: {@code y = fma(x, a, y)} over 1024 floats, 4096 times (4M multiply-adds). */
    @Benchmark
    public float peakJavaFma() {
        float[] x = fx;
        float[] y = fy;
        float a = fmultiplier;
        for (int r = 0; r < REPS; r++) {
            for (int i = 0; i < LOOP; i++) {
                y[i] = Math.fma(x[i], a, y[i]);
            }
        }
        return y[7];
    }

    /** Java int32 multiply-add loop: {@code y += x * a} over 1024 ints, 4096 times (4M multiply-adds). */
    @Benchmark
    public int peakJavaInt32MulAdd() {
        int[] x = ix;
        int[] y = iy;
        int a = multiplier; // a field, so that the JIT cannot turn the product into shifts
        for (int r = 0; r < REPS; r++) {
            for (int i = 0; i < LOOP; i++) {
                y[i] += x[i] * a;
            }
        }
        return y[7];
    }
}
