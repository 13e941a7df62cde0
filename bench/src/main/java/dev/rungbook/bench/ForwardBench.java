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
 * Float and integer-only forward passes of the sample classifier {@code conveyor-mlp} ({@code fc1 [256,72] -> ReLU ->
 * fc2 [128,256] -> ReLU -> fc3 [5,128]}) and the float pass of the thermal-tile conv net {@code thermal-cnn} (batch
 * norms folded) on batches of 512 validation samples, with the machine's multiply-add throughput measured in the same
 * run. The integer-only network handles linear and ReLU layers only, so the integer figure is for the classifier.
 * One classifier pass is {@code 512 * (72*256 + 256*128 + 128*5) = 26.5M} multiply-adds, one conv-net pass
 * {@code 512 * (8*9*256 + 16*72*64 + 4*256) = 47.7M}; {@code bench/summarize.py} turns the times into GFLOP/s and
 * GOP/s (2 operations per multiply-add) and shares of the peaks.
 *
 * <p>Every benchmark runs on one thread, the forward passes and the peaks alike; {@code bench/run} sets
 * {@code OPENBLAS_NUM_THREADS=1} so that the native sgemm does too. The fork runs with
 * {@code --add-modules jdk.incubator.vector}, as the notebook kernel does, so the forward passes take their Vector
 * API kernels and the register-resident peaks ({@link VectorPeaks}) can be measured: those, not the streaming loops
 * (which load two values and store one per multiply-add and so reach only a quarter to a third of the arithmetic's
 * throughput), are the ceiling the targets are measured against. Sample-time mode: on a shared machine the fastest
 * samples (p0) and the median tell apart the code's speed and the machine's load; the summary reports both.
 * {@link ForwardCpuTime} measures the same cases by thread CPU time, with an older library version side by side.
 */
@State(Scope.Benchmark)
@BenchmarkMode(Mode.SampleTime)
@OutputTimeUnit(TimeUnit.MILLISECONDS)
@Fork(value = 1, jvmArgsAppend = {"--add-modules", "jdk.incubator.vector"})
@Warmup(iterations = 3, time = 1)
@Measurement(iterations = 5, time = 1)
public class ForwardBench {
    /** Samples per batch. */
    public static final int BATCH = 512;
    private static final int LOOP = 1024;
    private static final int REPS = 4096;

    private Network net;
    private Network cnn;
    private Tensor cnnBatch;
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
        Map<String, Tensor> ct = new HashMap<>();
        try (Checkpoint c = Checkpoint.open(dir.resolve("thermal-cnn.f32.safetensors"))) {
            c.tensors().forEach((k, v) -> ct.put(k, Tensor.of(v.toFloatArray(), v.shape()).withName(k)));
        }
        cnn = Network.from(ct).conv2d("conv1", 1, 1).batchNorm("bn1").relu().maxPool(2, 2).conv2d("conv2", 1, 1)
                .batchNorm("bn2").relu().maxPool(2, 2).flatten().linear("fc").build().foldBatchNorm();
        float[] tiles = new float[BATCH * 256];
        System.arraycopy(Dataset.load(dir.resolve("thermal-validation.npz")).inputs().toFloatArray(), 0, tiles, 0,
                tiles.length);
        cnnBatch = Tensor.of(tiles, BATCH, 1, 16, 16);
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

    /** The float forward pass of the thermal-tile conv net (batch norms folded) on 512 tiles. */
    @Benchmark
    public Tensor cnnFloatForward() {
        return cnn.forward(cnnBatch);
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

    /** Register-resident float FMA chains ({@link VectorPeaks}): the float multiply-add ceiling. */
    @Benchmark
    public float peakVectorFma() {
        return VectorPeaks.floatFma(fx, fmultiplier);
    }

    /** Register-resident int32 multiply-add chains ({@link VectorPeaks}): the int32 multiply-add ceiling. */
    @Benchmark
    public int peakVectorInt32MulAdd() {
        return VectorPeaks.intMulAdd(ix, multiplier);
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
