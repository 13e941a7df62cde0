package dev.rungbook.bench;

import dev.rungbook.internal.Fused;
import dev.rungbook.internal.FusedSegments;
import dev.rungbook.quant.Quantized;
import dev.rungbook.quant.Quantizer;
import dev.rungbook.tensor.FloatFormat;
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
import org.openjdk.jmh.annotations.Scope;
import org.openjdk.jmh.annotations.Setup;
import org.openjdk.jmh.annotations.State;
import org.openjdk.jmh.annotations.Warmup;

/**
 * Issue 3's quantizer targets on a 4096 x 4096 float32 matrix, side by side in one run: a plain copy of the matrix
 * (the floor), the fused per-channel asymmetric int8 kernel (quantize + dequantize + squared-error and signal sums,
 * which give MSE and SQNR), the same through the public API ({@code apply} + {@code error().sqnrDb()}, which also
 * builds codes, scales and the full error report), per-group int4 and NF4 through the API, and the 16-level
 * codebook on 2^24 values. {@code fusedPerGroupInt4} and {@code fusedNf4} do the fused job per group (int4, groups of
 * 128; NF4, blocks of 64) with the library's per-group kernels and caller-owned outputs, as the int8 kernel does,
 * with the same codes, scales and values as the API's specs. {@code bench/numpy/quantize_baseline.py} does the fused job in NumPy for the ratio.
 * The report's KL divergence is computed on first use, so {@code error().sqnrDb()} does not pay for its histograms;
 * {@code apiPerChannelInt8AllMetrics} asks for every metric. {@link QuantizeVectorBench} runs the same benchmarks in
 * a JVM with the Vector API module.
 */
@State(Scope.Benchmark)
@BenchmarkMode(Mode.AverageTime)
@OutputTimeUnit(TimeUnit.MILLISECONDS)
@Warmup(iterations = 3, time = 1)
@Measurement(iterations = 4, time = 1)
@Fork(value = 1, jvmArgsAppend = {"-Xmx6g"})
public class QuantizeBench {
    static final int N = 4096;
    /** Per-channel asymmetric int8 (the fused kernel's spec). */
    static final Quantizer INT8 = Quantizer.linear(8).asymmetric().perChannel(0);
    /** Symmetric int4, groups of 128 along the input axis. */
    static final Quantizer INT4_G128 = Quantizer.linear(4).perGroup(1, 128);
    /** OCP FP8 E4M3, one scale per output channel (the fourth spec of the study benchmark). */
    static final Quantizer FP8 = Quantizer.floatFormat(FloatFormat.E4M3).perChannel(0);

    private float[] w;
    private Tensor matrix;
    private Tensor large;
    private float[] copy;
    private float[] scales;
    private int[] zeroPoints;
    private byte[] codes;
    private float[] dequant;
    private double[] sqErr;
    private double[] sqSignal;
    private float[] groupScales;
    private double[] groupErr;
    private double[] groupSignal;

    @Setup(Level.Trial)
    public void setUp() {
        SplittableRandom r = new SplittableRandom(2);
        w = new float[N * N];
        for (int row = 0; row < N; row++) {
            double range = Math.exp(r.nextDouble(-3, 1)); // channel ranges differing by ~50x
            for (int c = 0; c < N; c++) {
                w[row * N + c] = (float) (range * r.nextGaussian());
            }
        }
        matrix = Tensor.of(w, N, N);
        float[] big = new float[1 << 24];
        for (int i = 0; i < big.length; i++) {
            big[i] = (float) r.nextGaussian();
        }
        large = Tensor.of(big, big.length);
        copy = new float[w.length];
        scales = new float[N];
        zeroPoints = new int[N];
        codes = new byte[w.length];
        dequant = new float[w.length];
        sqErr = new double[N];
        sqSignal = new double[N];
        groupScales = new float[N * N / NF4_BLOCK];
        groupErr = new double[groupScales.length];
        groupSignal = new double[groupScales.length];
    }

    /** Floor: one plain copy of the matrix. */
    @Benchmark
    public float plainCopy() {
        System.arraycopy(w, 0, copy, 0, w.length);
        return copy[copy.length - 1];
    }

    /** The fused kernel: per-channel asymmetric int8 quantize + dequantize + MSE/SQNR sums. */
    @Benchmark
    public double fusedPerChannelInt8() {
        return fusedSqnr(w, scales, zeroPoints, codes, dequant, sqErr, sqSignal);
    }

    /** The fused kernel on the {@code N x N} matrix {@code w} (per-channel asymmetric int8); returns the SQNR. */
    static double fusedSqnr(float[] w, float[] scales, int[] zeroPoints, byte[] codes, float[] dequant,
            double[] sqErr, double[] sqSignal) {
        Fused.quantizeRows(w, N, N, 8, false, scales, zeroPoints, codes, dequant, sqErr, sqSignal);
        return sqnr(sqErr, sqSignal, N);
    }

    /** SQNR in dB from the first {@code count} error and signal sums. */
    private static double sqnr(double[] sqErr, double[] sqSignal, int count) {
        double e = 0;
        double s = 0;
        for (int i = 0; i < count; i++) {
            e += sqErr[i];
            s += sqSignal[i];
        }
        return 10 * Math.log10(s / e);
    }

    /** The fused job per group: symmetric int4, groups of 128 along each row ({@code INT4_G128}'s results). */
    @Benchmark
    public double fusedPerGroupInt4() {
        return fusedGroupsSqnr(w, groupScales, codes, dequant, groupErr, groupSignal, false);
    }

    /** The fused job per NF4 block of 64 ({@code Quantizer.nf4()}'s results). */
    @Benchmark
    public double fusedNf4() {
        return fusedGroupsSqnr(w, groupScales, codes, dequant, groupErr, groupSignal, true);
    }

    /** Values per NF4 block and per int4 group of the fused per-group cases. */
    static final int NF4_BLOCK = 64;
    static final int INT4_GROUP = 128;

    /**
     * The fused per-group kernel on {@code w} (NF4 blocks of {@value #NF4_BLOCK} or symmetric int4 groups of
     * {@value #INT4_GROUP}); returns the SQNR. The group arrays hold at least {@code N * N / NF4_BLOCK} entries.
     */
    static double fusedGroupsSqnr(float[] w, float[] scales, byte[] codes, float[] dequant, double[] sqErr,
            double[] sqSignal, boolean nf4) {
        int m = nf4 ? NF4_BLOCK : INT4_GROUP;
        int count = w.length / m;
        if (nf4) {
            FusedSegments.nf4(w, count, m, scales, codes, dequant, sqErr, sqSignal);
        } else {
            FusedSegments.linear(w, count, m, 4, scales, codes, dequant, sqErr, sqSignal);
        }
        return sqnr(sqErr, sqSignal, count);
    }

    /** The public API for the same job (also builds the full error report: MAE, cosine, KL of histograms...). */
    @Benchmark
    public double apiPerChannelInt8() {
        Quantized q = Quantizer.linear(8).asymmetric().perChannel(0).apply(matrix);
        return q.error().sqnrDb();
    }

    /** Per-group (128 along the input axis) symmetric int4 through the API. */
    @Benchmark
    public double apiPerGroupInt4() {
        return Quantizer.linear(4).perGroup(1, 128).apply(matrix).error().sqnrDb();
    }

    /** NF4 with blocks of 64 through the API. */
    @Benchmark
    public double apiNf4() {
        return Quantizer.nf4().apply(matrix).error().sqnrDb();
    }

    /** 16-level optimal codebook on 2^24 values, through the API. */
    @Benchmark
    public double apiCodebook16On2To24() {
        return Quantizer.codebook(16).apply(large).error().sqnrDb();
    }

    /** FP8 E4M3 per channel through the API. */
    @Benchmark
    public double apiFp8PerChannel() {
        return FP8.apply(matrix).error().sqnrDb();
    }

    /** {@code apply} alone (codes, scales, dequantized values; no error report) for int4 per group of 128. */
    @Benchmark
    public double applyPerGroupInt4() {
        return quantizeOnly(INT4_G128, matrix);
    }

    /** {@code apply} alone for NF4 blocks of 64. */
    @Benchmark
    public double applyNf4() {
        return quantizeOnly(Quantizer.nf4(), matrix);
    }

    /** {@code apply} alone for FP8 E4M3 per channel. */
    @Benchmark
    public double applyFp8PerChannel() {
        return quantizeOnly(FP8, matrix);
    }

    /** {@code apply} alone for per-channel asymmetric int8. */
    @Benchmark
    public double applyPerChannelInt8() {
        return quantizeOnly(INT8, matrix);
    }

    /** Quantizes {@code t} with {@code q} and returns something of the result (so the work is not dropped). */
    static double quantizeOnly(Quantizer q, Tensor t) {
        Quantized r = q.apply(t);
        return r.codes().get(r.codes().size() - 1) + r.dequantized().getFlat(0);
    }

    /** Per-channel int8 through the API with every metric of the report, the KL divergence of histograms too. */
    @Benchmark
    public double apiPerChannelInt8AllMetrics() {
        return Quantizer.linear(8).asymmetric().perChannel(0).apply(matrix).error().values()[8];
    }
}
