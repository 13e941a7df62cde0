package dev.rungbook.quant;

import dev.rungbook.internal.TensorAccess;
import dev.rungbook.io.Checkpoint;
import dev.rungbook.io.StreamingWriter;
import dev.rungbook.io.TensorInfo;
import dev.rungbook.progress.Progress;
import dev.rungbook.tensor.DType;
import dev.rungbook.tensor.FloatFormat;
import dev.rungbook.tensor.Tensor;
import java.io.IOException;
import java.io.UncheckedIOException;
import java.nio.ByteBuffer;
import java.nio.ByteOrder;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.ArrayList;
import java.util.Arrays;
import java.util.Collection;
import java.util.HashMap;
import java.util.LinkedHashMap;
import java.util.List;
import java.util.Map;
import java.util.Objects;
import java.util.function.Consumer;
import java.util.function.Supplier;
import java.util.regex.Pattern;

/**
 * Writes quantized checkpoints: the integer codes, scales, zero points and levels of each quantized tensor as
 * safetensors, with each tensor's spec in the header's {@code __metadata__}, so that this library
 * ({@link QuantizedCheckpoint}) and any safetensors reader can dequantize them bit for bit. On request it writes the
 * dequantized float32 checkpoint instead.
 *
 * <pre>{@code
 * try (Checkpoint in = Checkpoint.open(Path.of("model.safetensors"))) {
 *     Export.of(in).spec("*.weight", Quantizer.parse("int4 per-group(1,128)")).write(Path.of("model-int4.safetensors"));
 * }
 * Export.write(Path.of("two.safetensors"), List.of(q1, q2));   // results already in memory
 * }</pre>
 *
 * <h2>The exported form</h2>
 * A tensor {@code NAME} quantized with a spec becomes up to four tensors (data in this order, after the tensors before
 * it in the source):
 * <ul>
 *   <li>{@code NAME.codes}: one code per element, the source shape, in the narrowest integer dtype that holds every
 *       code of the grid: {@code I8} (signed linear up to 8 bits, binary, ternary, MXINT8), {@code U8} (unsigned linear
 *       up to 8 bits, float formats up to 8 bits and MX float elements as their bit patterns, NF4, logarithmic and
 *       codebook level indices up to 256 levels), {@code I16}, {@code U16} (FP16/BF16 bit patterns, larger
 *       codebooks). Codes are not bit-packed: sub-byte codes take a byte each (the spec's size accounting in
 *       {@link Quantized#bytes()} is what packing would give).</li>
 *   <li>{@code NAME.scales}: {@code F32}, one per segment, with the same rank as the source so that it broadcasts:
 *       per tensor all ones ({@code [1, 1]} for a matrix), per channel of axis {@code a} the channel count on axis
 *       {@code a} and 1 elsewhere, per group the source shape with the group axis divided by the group size. Element
 *       {@code idx} uses scale {@code scales[idx[k] / (shape[k] / scales.shape[k]) for each axis k]}. The flat order
 *       is that of {@link Quantized#scales()}. Codebooks, which have no scale, store ones.</li>
 *   <li>{@code NAME.zero_points}: asymmetric linear grids only; the integer zero points, shaped and indexed as the
 *       scales, in the codes' dtype.</li>
 *   <li>{@code NAME.levels}: {@code F32} level tables for level-based grids: {@code [1, k]} shared by all segments
 *       (NF4, logarithmic, and the {@code 2^bits} values of float formats up to 8 bits and MX float elements, NaN where
 *       a bit pattern is not a number), or {@code [segments, k]} one row per segment in the flat scale order (fitted
 *       codebooks).</li>
 * </ul>
 * A tensor without a spec is copied as it is (its stored dtype; values pass through float32, which is exact for
 * every float dtype and for integers up to 2^24).
 *
 * <h2>Metadata</h2>
 * {@code __metadata__} keeps the source's entries (except {@code rungbook.*} keys) and adds {@code rungbook.export}
 * ({@code quantized/1} or {@code dequantized/1}), {@code rungbook.source} (the source file name, when there is one),
 * and per quantized tensor {@code rungbook.spec.NAME} (the {@link SpecText spec text}; absent for specs with no text
 * form, such as learned roundings, whose codes still carry what was learned), {@code rungbook.label.NAME} (the
 * spec's {@link Quantizer#label()}), {@code rungbook.dtype.NAME} (the source dtype) and {@code rungbook.decode.NAME},
 * the rule that turns codes into values:
 * <pre>
 * value = float32( float64(scale) * (float64(level(code)) - float64(zero_point)) )
 *   decode "affine":    level = code, zero_point from NAME.zero_points (0 when absent)
 *   decode "half-step": level = code, zero_point = -0.5 (mid-rise grids)
 *   decode "table":     level = levels[row][code], row = the segment for [segments, k] tables, else 0; zero_point 0
 *   decode "mxint8":    level = code / 64; zero_point 0
 *   decode "fp16" / "bf16": level = the code's bit pattern read as binary16 / bfloat16; zero_point 0
 * </pre>
 * The product is exact in float64 for every grid here, so the single rounding to float32 reproduces
 * {@link Quantized#dequantized()} bit for bit.
 *
 * <h2>Safety</h2>
 * Writes are atomic; the output may not be the source file (compared by real path), nor any file an open
 * {@link Checkpoint} reads. Specs are checked against every selected tensor's shape before anything is written, so a
 * spec that does not fit fails at once, naming the tensor and the spec ({@link #keepUnfit()} copies such tensors
 * instead). Tensors are loaded, quantized and written one at a time.
 *
 * <p>Immutable: each fluent step returns a new export description; {@link #write} does the work.
 */
public final class Export {
    /** Format tag of quantized exports. */
    public static final String QUANTIZED_FORMAT = "quantized/1";
    /** Format tag of dequantized exports. */
    public static final String DEQUANTIZED_FORMAT = "dequantized/1";
    static final String PREFIX = "rungbook.";

    private final Checkpoint source;
    private final List<Rule> rules;
    private final boolean dequantized;
    private final boolean keepUnfit;

    /** A tensor selection: exact name or glob, and the spec (null keeps the tensor as it is). */
    private static final class Rule {
        final Pattern pattern;
        final String exact;
        final Quantizer spec;

        Rule(Pattern pattern, String exact, Quantizer spec) {
            this.pattern = pattern;
            this.exact = exact;
            this.spec = spec;
        }

        boolean matches(String name) {
            return exact != null ? exact.equals(name) : pattern.matcher(name).matches();
        }
    }

    private Export(Checkpoint source, List<Rule> rules, boolean dequantized, boolean keepUnfit) {
        this.source = source;
        this.rules = List.copyOf(rules);
        this.dequantized = dequantized;
        this.keepUnfit = keepUnfit;
    }

    /** An export of {@code source} that, until specs are added, copies every tensor. */
    public static Export of(Checkpoint source) {
        return new Export(Objects.requireNonNull(source, "source"), List.of(), false, false);
    }

    private Export with(Rule r) {
        List<Rule> l = new ArrayList<>(rules);
        l.add(r);
        return new Export(source, l, dequantized, keepUnfit);
    }

    /** Quantizes every tensor with {@code spec} (later rules override it where they match). */
    public Export spec(Quantizer spec) {
        return spec("*", spec);
    }

    /**
     * Quantizes the tensors whose names match {@code glob} with {@code spec}. In a glob {@code *} stands for any run of
     * characters (dots included) and {@code ?} for one character; everything else is literal. When several rules
     * match a tensor, the last one added wins.
     */
    public Export spec(String glob, Quantizer spec) {
        return with(new Rule(glob(glob), null, Objects.requireNonNull(spec, "spec")));
    }

    /** Quantizes each named tensor with its own spec (for example a mixed-precision plan); later rules win. */
    public Export specs(Map<String, Quantizer> byName) {
        Export e = this;
        for (Map.Entry<String, Quantizer> en : byName.entrySet()) {
            e = e.with(new Rule(null, Objects.requireNonNull(en.getKey(), "tensor name"),
                    Objects.requireNonNull(en.getValue(), () -> "spec of '" + en.getKey() + "'")));
        }
        return e;
    }

    /** Copies the tensors matching {@code glob} unquantized, overriding earlier rules. */
    public Export keep(String glob) {
        return with(new Rule(glob(glob), null, null));
    }

    /** Writes the dequantized float32 values of quantized tensors instead of their codes. */
    public Export dequantized() {
        return new Export(source, rules, true, keepUnfit);
    }

    /** Copies tensors that a matching spec does not fit (wrong axis, group size not dividing) instead of failing. */
    public Export keepUnfit() {
        return new Export(source, rules, dequantized, true);
    }

    /** The spec the rules give tensor {@code name}, or null if it is copied as it is (unfit tensors included). */
    public Quantizer specFor(String name) {
        Quantizer q = null;
        for (Rule r : rules) {
            if (r.matches(name)) {
                q = r.spec;
            }
        }
        if (q != null && keepUnfit && unfit(source.info(name), q) != null) {
            return null;
        }
        return q;
    }

    /** Same as {@code write(out, Progress.silent(), r -> { })}. */
    public void write(Path out) {
        write(out, Progress.silent(), r -> { });
    }

    /**
     * Writes the export to {@code out} (a {@code .safetensors} path), reporting one step per tensor to
     * {@code progress} (task {@code "export <file name>"}, and the quantizer's own steps) and handing each
     * {@link Quantized} result to {@code each} after it is written (for reports), one tensor in memory at a time.
     *
     * @throws IllegalArgumentException if {@code out} is the source file, a spec does not fit a tensor (unless
     *     {@link #keepUnfit()}), a tensor cannot be quantized, or output names clash
     * @throws UncheckedIOException if writing fails
     */
    public void write(Path out, Progress progress, Consumer<Quantized> each) {
        Objects.requireNonNull(out, "out");
        refuseSource(out, source.path());
        List<Item> items = new ArrayList<>();
        for (String name : source.names()) {
            TensorInfo info = source.info(name);
            Quantizer q = null;
            for (Rule r : rules) {
                if (r.matches(name)) {
                    q = r.spec;
                }
            }
            if (q != null) {
                String problem = unfit(info, q);
                if (problem != null && keepUnfit) {
                    q = null;
                } else if (problem != null) {
                    throw new IllegalArgumentException(source.path() + ": tensor '" + name + "' " + shapeText(info)
                            + ": " + problem + " (spec " + q.label() + "); choose the tensors with a narrower "
                            + "selection, or keep such tensors unquantized");
                }
            }
            items.add(new Item(name, info.dtype(), intShape(info), q, () -> source.tensor(name), null));
        }
        Map<String, String> meta = new LinkedHashMap<>();
        source.metadata().forEach((k, v) -> {
            if (!k.startsWith(PREFIX)) {
                meta.put(k, v);
            }
        });
        meta.put(PREFIX + "source", source.path().getFileName().toString());
        writeItems(out, items, meta, dequantized, progress, each);
    }

    /**
     * Writes results already in memory as a quantized checkpoint, each under its source tensor's name, in the given
     * order.
     *
     * @throws IllegalArgumentException if a source tensor has no name, or names clash
     */
    public static void write(Path out, Collection<Quantized> results) {
        writeResults(out, results, false);
    }

    /** Writes the dequantized float32 values of results already in memory, each under its source tensor's name. */
    public static void writeDequantized(Path out, Collection<Quantized> results) {
        writeResults(out, results, true);
    }

    private static void writeResults(Path out, Collection<Quantized> results, boolean dequantized) {
        Objects.requireNonNull(out, "out");
        List<Item> items = new ArrayList<>();
        for (Quantized r : results) {
            String name = r.source().name();
            if (name == null) {
                throw new IllegalArgumentException(out + ": a quantized tensor without a name cannot be exported"
                        + " (name it with Tensor.withName before quantizing)");
            }
            items.add(new Item(name, r.source().dtype(), r.source().shape(), r.spec(), null, r));
        }
        writeItems(out, items, new LinkedHashMap<>(), dequantized, Progress.silent(), r -> { });
    }

    // ---------------------------------------------------------------- layout

    /** One tensor to write: copied ({@code spec == null}) or quantized (from {@code load} or {@code done}). */
    private static final class Item {
        final String name;
        final DType dtype;
        final int[] shape;
        final Quantizer spec;
        final Supplier<Tensor> load;
        final Quantized done;

        Item(String name, DType dtype, int[] shape, Quantizer spec, Supplier<Tensor> load, Quantized done) {
            this.name = name;
            this.dtype = dtype;
            this.shape = shape;
            this.spec = spec;
            this.load = load;
            this.done = done;
        }
    }

    /** What a quantized tensor becomes in the file. */
    static final class Layout {
        final DType codes;
        final int[] scaleShape;
        final boolean zeroPoints;
        final int[] levelsShape;
        final String decode;

        Layout(DType codes, int[] scaleShape, boolean zeroPoints, int[] levelsShape, String decode) {
            this.codes = codes;
            this.scaleShape = scaleShape;
            this.zeroPoints = zeroPoints;
            this.levelsShape = levelsShape;
            this.decode = decode;
        }
    }

    /** The file layout of {@code q} applied to a tensor of {@code shape} (which it must fit). */
    static Layout layout(int[] shape, Quantizer q) {
        Granularity g = q.granularity;
        int axis = Engine.resolvedAxis(shape, g);
        int[] ss = new int[shape.length];
        Arrays.fill(ss, 1);
        if (g.kind() == Granularity.Kind.CHANNEL) {
            ss[axis] = shape[axis];
        } else if (g.kind() == Granularity.Kind.GROUP) {
            ss = new Segments(shape, g, axis).scaleShape();
        }
        int segments = 1;
        for (int d : ss) {
            segments *= d;
        }
        switch (q.kind) {
            case LINEAR:
                return new Layout(integerType(q.bits, !q.unsigned), ss, !q.symmetric, null,
                        q.midRise ? "half-step" : "affine");
            case FLOAT:
                if (q.format.bitWidth() > 8) {
                    return new Layout(DType.U16, ss, false, null, q.format == FloatFormat.F16 ? "fp16" : "bf16");
                }
                return new Layout(DType.U8, ss, false, new int[] {1, 1 << q.format.bitWidth()}, "table");
            case MX:
                if (q.format == null) {
                    return new Layout(DType.I8, ss, false, null, "mxint8");
                }
                return new Layout(DType.U8, ss, false, new int[] {1, 1 << q.format.bitWidth()}, "table");
            case NF4:
                return new Layout(DType.U8, ss, false, new int[] {1, 16}, "table");
            case LOG:
                return new Layout(DType.U8, ss, false, new int[] {1, (1 << q.bits) - 1}, "table");
            case CODEBOOK:
                return new Layout(q.bits <= 256 ? DType.U8 : DType.U16, ss, false, new int[] {segments, q.bits},
                        "table");
            default:
                return new Layout(DType.I8, ss, false, null, "affine");
        }
    }

    private static DType integerType(int bits, boolean signed) {
        if (bits <= 8) {
            return signed ? DType.I8 : DType.U8;
        }
        return signed ? DType.I16 : DType.U16;
    }

    /** Why {@code q} cannot quantize the tensor, or null. */
    private static String unfit(TensorInfo info, Quantizer q) {
        if (!info.fitsInTensor()) {
            return "too large to load as one tensor";
        }
        return Engine.axisProblem(intShape(info), q.granularity);
    }

    private static int[] intShape(TensorInfo info) {
        long[] s = info.shape();
        int[] out = new int[s.length];
        for (int k = 0; k < s.length; k++) {
            out[k] = (int) Math.min(Integer.MAX_VALUE, s[k]);
        }
        return out;
    }

    private static String shapeText(TensorInfo info) {
        return Arrays.toString(info.shape());
    }

    private static long[] longs(int[] s) {
        long[] out = new long[s.length];
        for (int k = 0; k < s.length; k++) {
            out[k] = s[k];
        }
        return out;
    }

    /**
     * The pattern of a tensor-name glob as {@link #spec(String, Quantizer)} reads it: {@code *} any run of characters
     * (dots included), {@code ?} one character, everything else literal; it must match the whole name.
     */
    public static Pattern glob(String glob) {
        Objects.requireNonNull(glob, "glob");
        StringBuilder b = new StringBuilder();
        for (int i = 0; i < glob.length(); i++) {
            char c = glob.charAt(i);
            if (c == '*') {
                b.append(".*");
            } else if (c == '?') {
                b.append('.');
            } else {
                b.append(Pattern.quote(String.valueOf(c)));
            }
        }
        return Pattern.compile(b.toString(), Pattern.DOTALL);
    }

    private static void refuseSource(Path out, Path source) {
        try {
            if (Files.exists(out) && Files.exists(source) && Files.isSameFile(out, source)) {
                throw new IllegalArgumentException(out + ": refusing to overwrite the input checkpoint "
                        + source.toRealPath() + "; write to another file");
            }
        } catch (IOException e) {
            throw new UncheckedIOException(out + ": could not compare with the input " + source + ": "
                    + e.getMessage(), e);
        }
    }

    // ---------------------------------------------------------------- writing

    private static void writeItems(Path out, List<Item> items, Map<String, String> meta, boolean dequantized,
            Progress progress, Consumer<Quantized> each) {
        meta.put(PREFIX + "export", dequantized ? DEQUANTIZED_FORMAT : QUANTIZED_FORMAT);
        List<TensorInfo> slots = new ArrayList<>();
        Map<String, String> owner = new HashMap<>();
        List<Layout> layouts = new ArrayList<>();
        for (Item it : items) {
            if (it.spec == null) {
                declare(out, slots, owner, it.name, it.name, it.dtype, longs(it.shape));
                layouts.add(null);
                continue;
            }
            String tag = it.spec.label();
            meta.put(PREFIX + "label." + it.name, tag);
            if (SpecText.hasText(it.spec)) {
                meta.put(PREFIX + "spec." + it.name, it.spec.toText());
            }
            meta.put(PREFIX + "dtype." + it.name, it.dtype.safetensorsName());
            if (dequantized) {
                declare(out, slots, owner, it.name, it.name, DType.F32, longs(it.shape));
                layouts.add(null);
                continue;
            }
            Layout l = layout(it.shape, it.spec);
            layouts.add(l);
            meta.put(PREFIX + "decode." + it.name, l.decode);
            declare(out, slots, owner, it.name, it.name + ".codes", l.codes, longs(it.shape));
            declare(out, slots, owner, it.name, it.name + ".scales", DType.F32, longs(l.scaleShape));
            if (l.zeroPoints) {
                declare(out, slots, owner, it.name, it.name + ".zero_points", l.codes, longs(l.scaleShape));
            }
            if (l.levelsShape != null) {
                declare(out, slots, owner, it.name, it.name + ".levels", DType.F32, longs(l.levelsShape));
            }
        }
        String task = "export " + out.getFileName();
        StreamingWriter.write(out, slots, meta, sink -> {
            for (int i = 0; i < items.size(); i++) {
                Progress.checkInterrupted(task);
                Item it = items.get(i);
                if (it.spec == null) {
                    sink.put(it.name, it.load.get());
                } else {
                    Quantized r = it.done != null ? it.done : it.spec.apply(it.load.get(), progress);
                    if (dequantized) {
                        sink.put(it.name, r.dequantized());
                    } else {
                        putQuantized(out, sink, it.name, r, layouts.get(i));
                    }
                    each.accept(r);
                }
                progress.update(task, i + 1, items.size(), Double.NaN);
            }
        });
        progress.finish(task);
    }

    private static void declare(Path out, List<TensorInfo> slots, Map<String, String> owner, String source,
            String name, DType dtype, long[] shape) {
        String prev = owner.putIfAbsent(name, source);
        if (prev != null) {
            throw new IllegalArgumentException(out + ": output tensor '" + name + "' would be written for both '"
                    + prev + "' and '" + source + "'; rename one of them, or keep the other unquantized");
        }
        slots.add(TensorInfo.of(name, dtype, shape));
    }

    private static void putQuantized(Path out, StreamingWriter.Sink sink, String name, Quantized r, Layout l) {
        int segments = 1;
        for (int d : l.scaleShape) {
            segments *= d;
        }
        if (r.segmentCount() != segments) {
            throw new IllegalStateException(out + ": tensor '" + name + "' has " + r.segmentCount()
                    + " scales, the layout expected " + segments);
        }
        Codes c = r.codes();
        int n = c.size();
        ByteBuffer b = ByteBuffer.allocate(n * l.codes.byteSize()).order(ByteOrder.LITTLE_ENDIAN);
        if (l.codes.byteSize() == 1) {
            for (int i = 0; i < n; i++) {
                b.put((byte) c.get(i));
            }
        } else {
            for (int i = 0; i < n; i++) {
                b.putShort((short) c.get(i));
            }
        }
        b.flip();
        sink.put(name + ".codes", b);
        sink.put(name + ".scales", r.scales().reshape(l.scaleShape));
        if (l.zeroPoints) {
            sink.put(name + ".zero_points", r.zeroPoints().reshape(l.scaleShape));
        }
        if (l.levelsShape != null) {
            Quantizer q = r.spec();
            Tensor levels;
            if (q.kind == Quantizer.Kind.FLOAT || q.kind == Quantizer.Kind.MX) {
                float[] table = new float[l.levelsShape[1]];
                for (int code = 0; code < table.length; code++) {
                    table[code] = q.format.decode(code);
                }
                levels = TensorAccess.wrap(table, l.levelsShape, DType.F32, name + ".levels");
            } else {
                levels = r.levels().orElseThrow(() -> new IllegalStateException(name + ": no levels"));
            }
            sink.put(name + ".levels", levels);
        }
    }
}
