package dev.rungbook.quant;

import dev.rungbook.progress.Progress;
import dev.rungbook.range.RangeRule;
import dev.rungbook.round.ElementRounding;
import dev.rungbook.round.LayerRounding;
import dev.rungbook.round.Rounding;
import dev.rungbook.tensor.FloatFormat;
import dev.rungbook.tensor.Tensor;
import java.util.Objects;

/**
 * An immutable description of how to put a tensor on a low-precision grid: the grid, which elements share a scale
 * ({@link Granularity}), how the clipping range is chosen ({@link RangeRule}) and how values are rounded
 * ({@link Rounding}). Each fluent step returns a new spec; {@link #apply(Tensor)} does the work.
 *
 * <pre>{@code
 * Quantizer q = Quantizer.linear(4).perGroup(1, 128).range(RangeRule.mse());
 * Quantized r = q.apply(w);          // codes, scales, dequantized tensor, bits per weight
 * r.error().sqnrDb();
 * q.label();                         // "int4 sym per-group(1,128) mse"
 * }</pre>
 *
 * <h2>Grids</h2>
 * <ul>
 *   <li>{@link #linear(int)}: integer codes {@code q} in {@code [qmin, qmax]} standing for {@code s * (q - z)}.
 *       Defaults (common practice for weights): symmetric (zero point 0, {@code s = max|x| / qmax}), signed codes
 *       {@code -2^(b-1) .. 2^(b-1)-1}, one scale per channel of axis 0, min-max range, round to nearest with ties to
 *       even. Asymmetric: {@code s = (hi - lo) / (qmax - qmin)} over the range widened to contain 0, zero point
 *       {@code z = clamp(round(qmin - lo / s))}, so that 0 is exact.</li>
 *   <li>{@link #floatFormat(FloatFormat)}: values divided by a scale {@code s = max|x| / format.max()} (one per tensor
 *       by default), rounded to the format (nearest even, saturating), multiplied back.</li>
 *   <li>{@link #mx(FloatFormat)}, {@link #mxInt8()}: OCP Microscaling: blocks of 32 elements along the last axis
 *       sharing a power-of-two E8M0 scale chosen by the specification's rule.</li>
 *   <li>{@link #nf4()}: the 16 NF4 levels, one absmax scale per block of 64 along the last axis.</li>
 *   <li>{@link #logarithmic(int)}: zero and signed powers of two {@code +-s * 2^-e}.</li>
 *   <li>{@link #codebook(int)}: k levels fitted to the values by optimal 1-D k-means (one codebook per tensor by
 *       default).</li>
 *   <li>{@link #binary()}, {@link #ternary()}: sign times a scale (XNOR-Net), and -1/0/+1 times a scale with a
 *       threshold (TWN); one scale per tensor by default.</li>
 * </ul>
 *
 * <p>Validation: specs that cannot exist are refused by the step that makes them (for example {@code linear(1)},
 * {@code binary().rounding(...)}); specs that do not fit a tensor (axis out of range, group size not dividing the
 * axis, codebook k above the number of distinct values) and tensors holding NaN or infinities are refused by
 * {@link #apply} with an {@link IllegalArgumentException} naming both the tensor and the spec.
 *
 * <p>Equality is by value; {@link #toString()} is the {@link #label()}.
 *
 * <h2>Text form</h2>
 * {@link #parse(String)} reads a short spec text such as {@code "int4 per-group(1,128) mse"} and {@link #toText()}
 * writes one; the grammar is in {@link SpecText}.
 */
public final class Quantizer {
    /** The kind of grid. */
    enum Kind { LINEAR, FLOAT, MX, NF4, LOG, CODEBOOK, BINARY, TERNARY }

    /** Mutable field bag used only while building a new spec. */
    private static final class Fields {
        Kind kind;
        int bits;
        boolean symmetric = true;
        boolean unsigned;
        boolean narrow;
        boolean midRise;
        boolean pow2;
        boolean scaled = true;
        Granularity granularity = Granularity.perChannel(0);
        RangeRule range = RangeRule.minMax();
        Rounding rounding = Rounding.nearest();
        FloatFormat format;
        double thresholdFactor = 0.7;
    }

    final Kind kind;
    final int bits;
    final boolean symmetric;
    final boolean unsigned;
    final boolean narrow;
    final boolean midRise;
    final boolean pow2;
    final boolean scaled;
    final Granularity granularity;
    final RangeRule range;
    final Rounding rounding;
    final FloatFormat format;
    final double thresholdFactor;

    private Quantizer(Fields f) {
        kind = f.kind;
        bits = f.bits;
        symmetric = f.symmetric;
        unsigned = f.unsigned;
        narrow = f.narrow;
        midRise = f.midRise;
        pow2 = f.pow2;
        scaled = f.scaled;
        granularity = f.granularity;
        range = f.range;
        rounding = f.rounding;
        format = f.format;
        thresholdFactor = f.thresholdFactor;
    }

    private Fields fields() {
        Fields f = new Fields();
        f.kind = kind;
        f.bits = bits;
        f.symmetric = symmetric;
        f.unsigned = unsigned;
        f.narrow = narrow;
        f.midRise = midRise;
        f.pow2 = pow2;
        f.scaled = scaled;
        f.granularity = granularity;
        f.range = range;
        f.rounding = rounding;
        f.format = format;
        f.thresholdFactor = thresholdFactor;
        return f;
    }

    private static Quantizer of(Kind kind, int bits, Granularity g, FloatFormat format) {
        Fields f = new Fields();
        f.kind = kind;
        f.bits = bits;
        f.granularity = g;
        f.format = format;
        return new Quantizer(f);
    }

    // ---------------------------------------------------------------- factories

    /**
     * A linear (uniform integer) grid of {@code bits} bits, 2 to 16: symmetric, signed, per channel of axis 0,
     * min-max range, round to nearest with ties to even.
     *
     * @throws IllegalArgumentException if {@code bits} is outside 2..16
     */
    public static Quantizer linear(int bits) {
        if (bits < 2 || bits > 16) {
            throw new IllegalArgumentException("int" + bits + ": a linear grid needs 2 to 16 bits, got " + bits);
        }
        return of(Kind.LINEAR, bits, Granularity.perChannel(0), null);
    }

    /**
     * A low-bit float grid: each value divided by its scale {@code s = max|x| / format.max()} (min-max range; one
     * scale per tensor by default), rounded to {@code format} to nearest even with saturation, and multiplied back.
     * {@link #unscaled()} gives a plain cast.
     */
    public static Quantizer floatFormat(FloatFormat format) {
        Objects.requireNonNull(format, "format");
        return of(Kind.FLOAT, format.bitWidth(), Granularity.perTensor(), format);
    }

    /**
     * An OCP Microscaling (MX v1.0) format with float elements: blocks of 32 consecutive elements along the last
     * axis share a scale {@code 2^e} stored as E8M0, {@code e = floor(log2(max|v|)) - emax(element format)}; each
     * element {@code v / 2^e} is rounded to the element format, nearest even, clamped to its largest magnitude.
     *
     * @param elements one of E4M3, E5M2 (MXFP8), E3M2, E2M3 (MXFP6), E2M1 (MXFP4)
     */
    public static Quantizer mx(FloatFormat elements) {
        Objects.requireNonNull(elements, "elements");
        if (elements == FloatFormat.F16 || elements == FloatFormat.BF16) {
            throw new IllegalArgumentException("MX element formats are E4M3, E5M2, E3M2, E2M3 and E2M1, not "
                    + elements);
        }
        return of(Kind.MX, elements.bitWidth(), Granularity.perGroup(-1, 32), elements);
    }

    /**
     * OCP MXINT8: blocks of 32 along the last axis share an E8M0 scale {@code 2^e} with
     * {@code e = floor(log2(max|v|))} (element emax 0); elements are 8-bit two's-complement integers {@code q} with an
     * implicit factor {@code 2^-6}, so an element stands for {@code 2^e * q / 64}, {@code q = clamp(round(64 v / 2^e),
     * -128, 127)}.
     */
    public static Quantizer mxInt8() {
        return of(Kind.MX, 8, Granularity.perGroup(-1, 32), null);
    }

    /**
     * NF4 (4-bit NormalFloat): the 16 fixed levels of QLoRA in [-1, 1], each block of 64 consecutive elements along
     * the last axis scaled by its absolute maximum; each value goes to the nearest level. Change the block with
     * {@link #blockSize(int)}.
     */
    public static Quantizer nf4() {
        return of(Kind.NF4, 4, Granularity.perGroup(-1, 64), null);
    }

    /**
     * A logarithmic (power-of-two) grid of {@code bits} bits, 2 to 8: the levels are 0 and {@code +-s * 2^-e} for
     * {@code e = 0 .. 2^(b-1) - 2} (so {@code 2^b - 1} levels), with {@code s} the channel's absolute maximum (min-max
     * range, per channel of axis 0 by default); each value goes to the nearest level.
     */
    public static Quantizer logarithmic(int bits) {
        if (bits < 2 || bits > 8) {
            throw new IllegalArgumentException("log" + bits + ": a logarithmic grid needs 2 to 8 bits, got " + bits);
        }
        return of(Kind.LOG, bits, Granularity.perChannel(0), null);
    }

    /**
     * A fitted codebook of {@code k} levels (2 to 65536): optimal 1-D k-means (minimum squared error) on the values,
     * solved exactly or to a certified optimum; one codebook per tensor by default (per channel or group on
     * request). Codes are level indices of {@code ceil(log2 k)} bits; the levels are stored as float32.
     */
    public static Quantizer codebook(int k) {
        if (k < 2 || k > 65536) {
            throw new IllegalArgumentException("codebook" + k + ": a codebook needs 2 to 65536 levels, got " + k);
        }
        return of(Kind.CODEBOOK, k, Granularity.perTensor(), null);
    }

    /**
     * Binary weights (XNOR-Net): {@code alpha * sign(w)} with {@code alpha = mean |w|}, one alpha per tensor by
     * default (per channel on request). Zero counts as positive. Codes are -1 and +1, stored in 1 bit.
     */
    public static Quantizer binary() {
        return of(Kind.BINARY, 1, Granularity.perTensor(), null);
    }

    /**
     * Ternary weights (TWN): threshold {@code delta = 0.7 * mean |w|}, codes {@code sign(w)} where
     * {@code |w| > delta} and 0 elsewhere, scale {@code alpha} = mean of {@code |w|} over the kept weights (0 when none
     * is kept). One scale per tensor by default. Codes -1/0/+1 stored in 2 bits. See {@link #thresholdFactor}.
     */
    public static Quantizer ternary() {
        return of(Kind.TERNARY, 2, Granularity.perTensor(), null);
    }

    /**
     * The spec a spec text describes, for example {@code Quantizer.parse("uint8 asym per-tensor p99.9")}; the
     * grammar is in {@link SpecText}.
     *
     * @throws SpecSyntaxException naming the bad token and its column
     */
    public static Quantizer parse(String text) {
        return SpecText.parse(text);
    }

    // ---------------------------------------------------------------- fluent steps

    private Quantizer require(boolean ok, String what) {
        if (!ok) {
            throw new IllegalArgumentException(label() + ": " + what);
        }
        return this;
    }

    /** Symmetric range: zero point 0, scale from {@code max|x|} (the default of linear grids). */
    public Quantizer symmetric() {
        require(kind == Kind.LINEAR, "symmetric/asymmetric applies to linear grids");
        Fields f = fields();
        f.symmetric = true;
        return new Quantizer(f);
    }

    /** Asymmetric range: scale and zero point from {@code [min, max]} widened to contain 0. Linear grids only. */
    public Quantizer asymmetric() {
        require(kind == Kind.LINEAR, "symmetric/asymmetric applies to linear grids");
        require(!midRise, "a mid-rise grid is symmetric");
        Fields f = fields();
        f.symmetric = false;
        return new Quantizer(f);
    }

    /**
     * Unsigned codes {@code 0 .. 2^b - 1}. With a symmetric range the zero point stays 0 and negative values clamp
     * to 0 (for non-negative data such as activations after ReLU).
     */
    public Quantizer unsigned() {
        require(kind == Kind.LINEAR, "unsigned applies to linear grids");
        require(!midRise, "a mid-rise grid has signed codes");
        Fields f = fields();
        f.unsigned = true;
        return new Quantizer(f);
    }

    /** Drops the most negative code: {@code -(2^(b-1) - 1) .. 2^(b-1) - 1} (for 8 bits -127..127), or 0..2^b - 2. */
    public Quantizer narrowRange() {
        require(kind == Kind.LINEAR, "narrow range applies to linear grids");
        require(!midRise, "a mid-rise grid has no code to drop");
        Fields f = fields();
        f.narrow = true;
        return new Quantizer(f);
    }

    /**
     * A symmetric uniform grid without a level at zero: levels {@code +-(k + 1/2) s}, {@code k = 0 .. 2^(b-1) - 1}
     * (codes {@code q} in {@code -2^(b-1) .. 2^(b-1) - 1} stand for {@code s (q + 1/2)}, zero point -1/2), the
     * textbook mid-rise quantizer with {@code 2^b} levels. Its {@code 2^b} cells of width {@code s} cover the clipping
     * range {@code [-a, a]} (the overload point is {@code a}): {@code s = a / 2^(b-1)}, so the top level is
     * {@code a - s/2}.
     */
    public Quantizer midRise() {
        require(kind == Kind.LINEAR, "mid-rise applies to linear grids");
        require(symmetric && !unsigned && !narrow, "mid-rise needs a symmetric signed full-range grid");
        Fields f = fields();
        f.midRise = true;
        return new Quantizer(f);
    }

    /** One scale for the whole tensor. */
    public Quantizer perTensor() {
        return granularity(Granularity.perTensor());
    }

    /** One scale per channel of {@code axis} (-1: the last axis). */
    public Quantizer perChannel(int axis) {
        return granularity(Granularity.perChannel(axis));
    }

    /** One scale per group of {@code size} consecutive elements along {@code axis} (-1: the last axis). */
    public Quantizer perGroup(int axis, int size) {
        return granularity(Granularity.perGroup(axis, size));
    }

    /** Blocks of {@code size} along the last axis: {@code perGroup(-1, size)}. */
    public Quantizer blockSize(int size) {
        return granularity(Granularity.perGroup(-1, size));
    }

    /** The given granularity. */
    public Quantizer granularity(Granularity g) {
        Objects.requireNonNull(g, "granularity");
        Fields f = fields();
        f.granularity = g;
        return new Quantizer(f);
    }

    /**
     * Scales rounded up to a power of two (so nothing extra is clipped), stored as an 8-bit exponent. Linear, float,
     * NF4 and logarithmic grids (MX scales are powers of two already). A segment of values so small that its scale
     * would be below the smallest float32 gets that, {@code 2^-149}, never 0.
     */
    public Quantizer powerOfTwoScale() {
        require(kind == Kind.LINEAR || kind == Kind.FLOAT || kind == Kind.NF4 || kind == Kind.LOG,
                "power-of-two scales apply to linear, float, NF4 and logarithmic grids");
        require(kind != Kind.FLOAT || scaled, "an unscaled float format has no scale");
        Fields f = fields();
        f.pow2 = true;
        return new Quantizer(f);
    }

    /** A plain cast to the float format, without a scale (values beyond its range saturate). Float formats only. */
    public Quantizer unscaled() {
        require(kind == Kind.FLOAT, "unscaled applies to float formats");
        Fields f = fields();
        f.scaled = false;
        f.pow2 = false;
        f.range = RangeRule.minMax();
        return new Quantizer(f);
    }

    /**
     * The rule choosing each segment's clipping range. Linear, float (scaled), NF4 and logarithmic grids; MX scales
     * follow the specification, and codebook, binary and ternary grids fit their own levels.
     */
    public Quantizer range(RangeRule rule) {
        Objects.requireNonNull(rule, "rule");
        require(kind == Kind.LINEAR || kind == Kind.FLOAT && scaled || kind == Kind.NF4 || kind == Kind.LOG,
                "a range rule applies to linear, scaled float, NF4 and logarithmic grids, not " + kindName());
        Fields f = fields();
        f.range = rule;
        return new Quantizer(f);
    }

    /**
     * The rounding rule. Element rules work on linear grids; {@link LayerRounding} rules (learned rounding) too. Other
     * grids round to their nearest level and accept only {@link Rounding#nearest()}.
     */
    public Quantizer rounding(Rounding rule) {
        Objects.requireNonNull(rule, "rule");
        require(rule instanceof ElementRounding || rule instanceof LayerRounding,
                "rounding '" + rule.label() + "' is neither an element nor a layer rule");
        require(kind == Kind.LINEAR || rule.equals(Rounding.nearest()),
                "only linear grids take a rounding rule; " + kindName() + " rounds to the nearest level");
        Fields f = fields();
        f.rounding = rule;
        return new Quantizer(f);
    }

    /** The ternary threshold factor {@code t} in {@code delta = t * mean|w|} (default 0.7, as published). */
    public Quantizer thresholdFactor(double factor) {
        require(kind == Kind.TERNARY, "a threshold factor applies to ternary grids");
        if (!(factor >= 0) || !Double.isFinite(factor)) {
            throw new IllegalArgumentException(label() + ": threshold factor must be finite and >= 0, got " + factor);
        }
        Fields f = fields();
        f.thresholdFactor = factor;
        return new Quantizer(f);
    }

    // ---------------------------------------------------------------- terminal steps

    /** Quantizes {@code t} (see the class description); same as {@code apply(t, Progress.silent())}. */
    public Quantized apply(Tensor t) {
        return apply(t, Progress.silent());
    }

    /**
     * Quantizes {@code t}, reporting each channel or group to {@code progress} and stopping with an
     * {@link dev.rungbook.progress.OperationInterruptedException} if the thread is interrupted.
     *
     * @throws IllegalArgumentException if the spec does not fit the tensor, the tensor holds NaN or infinity, or a
     *     value near {@link Float#MAX_VALUE} would dequantize beyond the float32 range on this grid
     */
    public Quantized apply(Tensor t, Progress progress) {
        Objects.requireNonNull(t, "tensor");
        Objects.requireNonNull(progress, "progress");
        return checkRepresentable(t, new Engine(this, t, progress).run());
    }

    /**
     * Refuses a result whose dequantized values left the float32 range: near {@link Float#MAX_VALUE} a grid can have
     * levels beyond it (the extra negative code of a signed grid, a zero point that is not centred, a power-of-two
     * scale rounded up, the MXINT8 code -128 at the largest E8M0 scale). Costs one pass over the segments unless some
     * segment's largest level is beyond float32, and one over the values only then.
     */
    private Quantized checkRepresentable(Tensor t, Quantized r) {
        double units;
        switch (kind) {
            case LINEAR:
                units = qmax() - (double) qmin() + 1; // |q - z| for a zero point within the codes (or -1/2)
                break;
            case FLOAT:
                units = format.max();
                break;
            case MX:
                units = format == null ? 2 : format.max();
                break;
            case NF4:
            case LOG:
                units = 1;
                break;
            default:
                return r; // codebook levels and sign-grid alphas are means of the (finite) values
        }
        boolean risky = false;
        for (float s : dev.rungbook.internal.TensorAccess.data(r.scales())) {
            if (!(s * units <= Float.MAX_VALUE)) {
                risky = true;
                break;
            }
        }
        if (!risky) {
            return r;
        }
        float[] x = dev.rungbook.internal.TensorAccess.data(t);
        float[] y = dev.rungbook.internal.TensorAccess.data(r.dequantized());
        for (int i = 0; i < y.length; i++) {
            if (!Float.isFinite(y[i])) {
                throw new IllegalArgumentException(t.label() + ": value " + x[i] + " at index " + i
                        + " dequantizes to " + y[i] + ": this grid's levels reach beyond the float32 range ("
                        + Float.MAX_VALUE + "); scale the tensor down or use a symmetric min-max grid (spec "
                        + label() + ")");
            }
        }
        return r;
    }

    /**
     * Why this spec cannot quantize a tensor of {@code shape} (its axis is out of range, or its group size does not
     * divide the axis), or empty if the shape fits. Checks only the shape: {@link #apply} can still refuse values
     * (NaN, too few distinct values for a codebook).
     */
    public java.util.Optional<String> shapeProblem(int... shape) {
        return java.util.Optional.ofNullable(Engine.axisProblem(shape.clone(), granularity));
    }

    // ---------------------------------------------------------------- accessors

    /** The granularity. */
    public Granularity granularity() {
        return granularity;
    }

    /** The range rule. */
    public RangeRule rangeRule() {
        return range;
    }

    /** The rounding rule. */
    public Rounding rounding() {
        return rounding;
    }

    /** The width of one code in bits (for a codebook, {@code ceil(log2 k)}). */
    public int codeBits() {
        if (kind == Kind.CODEBOOK) {
            return 32 - Integer.numberOfLeadingZeros(bits - 1);
        }
        return bits;
    }

    /** The smallest code of a linear grid. */
    int qmin() {
        if (unsigned) {
            return 0;
        }
        return narrow ? -(1 << (bits - 1)) + 1 : -(1 << (bits - 1));
    }

    /** The largest code of a linear grid. */
    int qmax() {
        if (unsigned) {
            return narrow ? (1 << bits) - 2 : (1 << bits) - 1;
        }
        return (1 << (bits - 1)) - 1;
    }

    private String kindName() {
        switch (kind) {
            case LINEAR:
                return "linear grids";
            case FLOAT:
                return "float formats";
            case MX:
                return "MX formats";
            case NF4:
                return "NF4";
            case LOG:
                return "logarithmic grids";
            case CODEBOOK:
                return "codebooks";
            case BINARY:
                return "binary grids";
            default:
                return "ternary grids";
        }
    }

    static String formatName(FloatFormat f) {
        switch (f) {
            case F16:
                return "fp16";
            case BF16:
                return "bf16";
            case E4M3:
                return "fp8-e4m3";
            case E5M2:
                return "fp8-e5m2";
            case E3M2:
                return "fp6-e3m2";
            case E2M3:
                return "fp6-e2m3";
            default:
                return "fp4-e2m1";
        }
    }

    /**
     * A readable, stable label, for example {@code int8 sym per-channel(0)}, {@code int4 sym per-group(1,128) mse},
     * {@code uint8 asym per-tensor p99.9}, {@code fp8-e4m3 per-tensor}, {@code mxfp4-e2m1 per-group(last,32)},
     * {@code nf4 per-group(last,64)}, {@code codebook16 per-tensor}, {@code ternary(0.7) per-tensor}. The range rule
     * appears unless it is min-max, the rounding unless it is nearest-even.
     */
    public String label() {
        StringBuilder b = new StringBuilder();
        switch (kind) {
            case LINEAR:
                b.append(unsigned ? "uint" : "int").append(bits).append(symmetric ? " sym" : " asym");
                if (narrow) {
                    b.append(" narrow");
                }
                if (midRise) {
                    b.append(" midrise");
                }
                break;
            case FLOAT:
                b.append(formatName(format));
                break;
            case MX:
                b.append(format == null ? "mxint8" : "mx" + formatName(format));
                break;
            case NF4:
                b.append("nf4");
                break;
            case LOG:
                b.append("log").append(bits);
                break;
            case CODEBOOK:
                b.append("codebook").append(bits);
                break;
            case BINARY:
                b.append("binary");
                break;
            default:
                b.append("ternary(").append(thresholdFactor).append(')');
                break;
        }
        b.append(' ').append(kind == Kind.FLOAT && !scaled ? "unscaled" : granularity.label());
        if (pow2) {
            b.append(" pow2-scale");
        }
        if (!range.equals(RangeRule.minMax())) {
            b.append(' ').append(range.label());
        }
        if (!rounding.equals(Rounding.nearest())) {
            b.append(' ').append(rounding.label());
        }
        return b.toString();
    }

    /**
     * The canonical spec text ({@link SpecText#format}); {@code Quantizer.parse(q.toText()).equals(q)}.
     *
     * @throws IllegalArgumentException for a learned or custom rounding or a custom range rule (no text form)
     */
    public String toText() {
        return SpecText.format(this);
    }

    @Override
    public boolean equals(Object o) {
        if (!(o instanceof Quantizer)) {
            return false;
        }
        Quantizer q = (Quantizer) o;
        return kind == q.kind && bits == q.bits && symmetric == q.symmetric && unsigned == q.unsigned
                && narrow == q.narrow && midRise == q.midRise && pow2 == q.pow2 && scaled == q.scaled
                && granularity.equals(q.granularity) && range.equals(q.range) && rounding.equals(q.rounding)
                && format == q.format && Double.compare(thresholdFactor, q.thresholdFactor) == 0;
    }

    @Override
    public int hashCode() {
        return Objects.hash(kind, bits, symmetric, unsigned, narrow, midRise, pow2, scaled, granularity, range,
                rounding, format, thresholdFactor);
    }

    /** The {@link #label()}. */
    @Override
    public String toString() {
        return label();
    }
}
