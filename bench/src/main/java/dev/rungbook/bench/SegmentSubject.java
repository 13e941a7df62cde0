package dev.rungbook.bench;

import dev.rungbook.internal.Fused;
import dev.rungbook.internal.FusedSegments;
import dev.rungbook.quant.Quantized;
import dev.rungbook.quant.Quantizer;
import dev.rungbook.tensor.Tensor;
import java.util.LinkedHashMap;
import java.util.Map;
import java.util.SplittableRandom;
import java.util.function.DoubleSupplier;
import java.util.function.Function;

/**
 * The {@code apply} calls {@link SegmentCpuTime} times, on {@link QuantizeCpuTime}'s 4096 x 4096 matrix (seed 2, row
 * ranges {@code exp(U(-3, 1))}), with public API that every library version since the segment kernels came has.
 * {@link SegmentCpuTime} loads this class once with the library under test and, with {@code --before}, once more in
 * a class loader that takes every {@code dev.rungbook} class from an older library jar.
 *
 * <p>Cases: per-group int4 (group 128 along the rows) and NF4 (blocks of 64), each also with the library's segment
 * kernels switched off (system property {@code rungbook.segmentKernels=false} around the call: the general
 * per-segment path), per-channel asymmetric int8 (the fused row kernel, which the segment kernels must not slow
 * down when both run in one JVM), and {@link QuantizeCpuTime}'s three fused jobs with caller-owned outputs.
 */
public final class SegmentSubject implements Function<String, DoubleSupplier> {
    private static final String KERNELS = "rungbook.segmentKernels";
    private final Map<String, DoubleSupplier> cases = new LinkedHashMap<>();

    public SegmentSubject() {
        int n = 4096;
        SplittableRandom r = new SplittableRandom(2);
        float[] w = new float[n * n];
        for (int row = 0; row < n; row++) {
            double range = Math.exp(r.nextDouble(-3, 1));
            for (int c = 0; c < n; c++) {
                w[row * n + c] = (float) (range * r.nextGaussian());
            }
        }
        Tensor matrix = Tensor.of(w, n, n);
        Quantizer int4 = Quantizer.linear(4).perGroup(1, 128);
        Quantizer nf4 = Quantizer.nf4();
        Quantizer int8 = Quantizer.linear(8).asymmetric().perChannel(0);
        cases.put("applyPerGroupInt4", () -> apply(int4, matrix));
        cases.put("applyNf4", () -> apply(nf4, matrix));
        cases.put("applyPerGroupInt4General", () -> general(int4, matrix));
        cases.put("applyNf4General", () -> general(nf4, matrix));
        cases.put("applyPerChannelInt8", () -> apply(int8, matrix));
        // the fused jobs with caller-owned outputs (QuantizeBench's fused cases, written here so that a --before
        // run takes them from the older jar too)
        float[] scales = new float[n * n / 64];
        int[] zeros = new int[n];
        byte[] codes = new byte[n * n];
        float[] dq = new float[n * n];
        double[] err = new double[n * n / 64];
        double[] sig = new double[n * n / 64];
        cases.put("fusedPerChannelInt8", () -> {
            Fused.quantizeRows(w, n, n, 8, false, scales, zeros, codes, dq, err, sig);
            return err[0] + sig[n - 1];
        });
        cases.put("fusedPerGroupInt4", () -> {
            FusedSegments.linear(w, n * n / 128, 128, 4, scales, codes, dq, err, sig);
            return err[0] + sig[n * n / 128 - 1];
        });
        cases.put("fusedNf4", () -> {
            FusedSegments.nf4(w, n * n / 64, 64, scales, codes, dq, err, sig);
            return err[0] + sig[n * n / 64 - 1];
        });
    }

    private static double apply(Quantizer q, Tensor t) {
        Quantized r = q.apply(t);
        return r.codes().get(r.codes().size() - 1) + r.dequantized().getFlat(0);
    }

    private static double general(Quantizer q, Tensor t) {
        System.setProperty(KERNELS, "false");
        try {
            return apply(q, t);
        } finally {
            System.clearProperty(KERNELS);
        }
    }

    /** The case names, in order. */
    public Iterable<String> names() {
        return cases.keySet();
    }

    @Override
    public DoubleSupplier apply(String name) {
        return cases.get(name);
    }
}
