package dev.rungbook.quant;

import dev.rungbook.internal.TensorAccess;
import dev.rungbook.metrics.ErrorReport;
import dev.rungbook.tensor.DType;
import dev.rungbook.tensor.FloatFormat;
import dev.rungbook.tensor.Tensor;
import java.util.Arrays;
import java.util.Optional;

/**
 * The result of {@link Quantizer#apply}: integer codes, the scales and zero points of each segment (channel, group
 * or tensor), the dequantized tensor, the spec that made it, size accounting and the error against the original.
 * Immutable.
 *
 * <h2>Size accounting</h2>
 * {@link #bytes()} counts bit-packed codes plus the stored side information: a float32 scale per segment (8 bits when
 * the scale is a power of two or an MX E8M0 exponent), an integer zero point of the code width per segment for
 * asymmetric linear grids, and float32 levels for fitted codebooks. {@link #bitsPerWeight()} is the total bits divided
 * by the number of elements.
 */
public final class Quantized {
    private final Quantizer spec;
    private final Tensor source;
    private final Tensor dequantized;
    private final Codes codes;
    private final float[] scales;
    private final int[] scaleShape;
    private final float[] zeroPoints;
    private final float[][] levels;
    private final long overheadBits;
    private final int errorAxis;
    private volatile ErrorReport error;

    Quantized(Quantizer spec, Tensor source, Tensor dequantized, Codes codes, float[] scales, int[] scaleShape,
            float[] zeroPoints, float[][] levels, long overheadBits, int errorAxis) {
        this.spec = spec;
        this.source = source;
        this.dequantized = dequantized;
        this.codes = codes;
        this.scales = scales;
        this.scaleShape = scaleShape;
        this.zeroPoints = zeroPoints;
        this.levels = levels;
        this.overheadBits = overheadBits;
        this.errorAxis = errorAxis;
    }

    /** The spec that produced this result. */
    public Quantizer spec() {
        return spec;
    }

    /** The tensor that was quantized. */
    public Tensor source() {
        return source;
    }

    /** The dequantized values (what the codes stand for), same shape and name as the source. */
    public Tensor dequantized() {
        return dequantized;
    }

    /** The codes, one per element in row-major order (see {@link Codes} for what a code means per grid). */
    public Codes codes() {
        return codes;
    }

    /** The number of segments (scales). */
    public int segmentCount() {
        return scales.length;
    }

    /**
     * The scales, one per segment: shape {@code [1]} per tensor, {@code [dim]} per channel, and per group the source
     * shape with the group axis divided by the group size (numbered as {@link Tensor#groups}). Binary and ternary
     * grids report their alpha; MX its power of two; codebooks, which have no scale, report 1.
     */
    public Tensor scales() {
        return TensorAccess.wrap(scales.clone(), scaleShape, DType.F32, name("scales"));
    }

    /** The zero points, shaped as {@link #scales()}; 0 for symmetric and non-linear grids, -0.5 for mid-rise. */
    public Tensor zeroPoints() {
        float[] z = zeroPoints == null ? new float[scales.length] : zeroPoints.clone();
        return TensorAccess.wrap(z, scaleShape, DType.F32, name("zero_points"));
    }

    /**
     * The levels of a level-based grid, shaped {@code [segments, k]} for fitted codebooks and {@code [1, k]} for NF4
     * and logarithmic grids (whose levels are in units of the scale); empty for other grids.
     */
    public Optional<Tensor> levels() {
        if (levels == null) {
            return Optional.empty();
        }
        int k = levels[0].length;
        float[] flat = new float[levels.length * k];
        for (int s = 0; s < levels.length; s++) {
            System.arraycopy(levels[s], 0, flat, s * k, k);
        }
        return Optional.of(TensorAccess.wrap(flat, new int[] {levels.length, k}, DType.F32, name("levels")));
    }

    private String name(String what) {
        return source.name() == null ? what : source.name() + "." + what;
    }

    /**
     * Every value that segment {@code segment} can represent, ascending and distinct (for marking the grid in a
     * histogram): {@code s * (q - z)} for all codes of a linear grid, the scaled finite values of a float format,
     * the scaled levels of NF4, logarithmic and codebook grids, {@code -+alpha} (and 0) for binary (ternary).
     */
    public double[] gridLevels(int segment) {
        java.util.Objects.checkIndex(segment, scales.length);
        double s = scales[segment];
        switch (spec.kind) {
            case LINEAR: {
                double z = zeroPoints[segment];
                int qmin = spec.qmin();
                int qmax = spec.qmax();
                double[] out = new double[qmax - qmin + 1];
                for (int c = qmin; c <= qmax; c++) {
                    out[c - qmin] = (float) (s * (c - z));
                }
                return distinctSorted(out);
            }
            case FLOAT:
            case MX: {
                if (spec.format == null) {
                    double[] out = new double[256];
                    for (int c = -128; c <= 127; c++) {
                        out[c + 128] = (float) (s * c / 64.0);
                    }
                    return distinctSorted(out);
                }
                FloatFormat f = spec.format;
                int count = 1 << f.bitWidth();
                double[] out = new double[count];
                int k = 0;
                for (int c = 0; c < count; c++) {
                    float v = f.decode(c);
                    if (Float.isFinite(v)) {
                        out[k++] = (float) (s * v);
                    }
                }
                return distinctSorted(Arrays.copyOf(out, k));
            }
            case NF4:
            case LOG: {
                float[] l = levels[0];
                double[] out = new double[l.length];
                for (int i = 0; i < l.length; i++) {
                    out[i] = (float) (s * l[i]);
                }
                return distinctSorted(out);
            }
            case CODEBOOK: {
                float[] l = levels[segment];
                double[] out = new double[l.length];
                for (int i = 0; i < l.length; i++) {
                    out[i] = l[i];
                }
                return distinctSorted(out);
            }
            case BINARY:
                return distinctSorted(new double[] {-s, s});
            default:
                return distinctSorted(new double[] {-s, 0, s});
        }
    }

    private static double[] distinctSorted(double[] v) {
        double[] c = v.clone();
        for (int i = 0; i < c.length; i++) {
            c[i] = c[i] == 0 ? 0.0 : c[i];
        }
        return Arrays.stream(c).sorted().distinct().toArray();
    }

    /** Bits of side information (scales, zero points, codebook levels) in all. */
    public long overheadBits() {
        return overheadBits;
    }

    /** Total storage in bits: bit-packed codes plus side information. */
    public long totalBits() {
        return (long) codes.size() * codes.bits() + overheadBits;
    }

    /** Total bits divided by the number of elements (the code width for an empty tensor). */
    public double bitsPerWeight() {
        return codes.size() == 0 ? codes.bits() : (double) totalBits() / codes.size();
    }

    /** Storage in bytes, {@code ceil(totalBits / 8)}. */
    public long bytes() {
        return (totalBits() + 7) / 8;
    }

    /**
     * The error of the dequantized values against the source; its per-channel table runs over the spec's channel
     * axis (axis 0 for per-tensor and per-group specs).
     */
    public ErrorReport error() {
        ErrorReport e = error;
        if (e == null) {
            e = ErrorReport.of(source, dequantized).withChannelAxis(errorAxis);
            error = e;
        }
        return e;
    }

    /** For example {@code Quantized 'fc1.weight' [256, 64] int4 sym per-channel(0): 4.50 bits/weight, 9216 bytes}. */
    @Override
    public String toString() {
        return "Quantized" + (source.name() == null ? "" : " '" + source.name() + "'") + " "
                + Arrays.toString(source.shape()) + " " + spec.label() + ": "
                + String.format(java.util.Locale.ROOT, "%.3f", bitsPerWeight()) + " bits/weight, " + bytes()
                + " bytes";
    }
}
