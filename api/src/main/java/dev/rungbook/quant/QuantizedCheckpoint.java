package dev.rungbook.quant;

import dev.rungbook.internal.TensorAccess;
import dev.rungbook.io.Checkpoint;
import dev.rungbook.io.CheckpointFormatException;
import dev.rungbook.tensor.DType;
import dev.rungbook.tensor.FloatFormat;
import dev.rungbook.tensor.Tensor;
import java.nio.file.Path;
import java.util.ArrayList;
import java.util.Arrays;
import java.util.Collections;
import java.util.LinkedHashSet;
import java.util.List;
import java.util.Objects;
import java.util.Optional;
import java.util.Set;

/**
 * Reads a checkpoint written by {@link Export}: the codes, scales, zero points and levels of each quantized tensor,
 * its spec, and its dequantized values, bit for bit those of {@link Quantized#dequantized()} when the export was made
 * (see {@link Export} for the layout and the decoding rule). Tensors that were copied unquantized read as they are;
 * any safetensors file opens, with every tensor unquantized when it has no export metadata.
 *
 * <pre>{@code
 * try (QuantizedCheckpoint q = QuantizedCheckpoint.open(Path.of("model-int4.safetensors"))) {
 *     Tensor w = q.dequantized("fc1.weight");
 *     q.spec("fc1.weight");            // Optional[int4 sym per-group(1,128)]
 * }
 * }</pre>
 *
 * <p>A malformed export (a missing part, shapes that do not agree, a code outside its table) gives a
 * {@link CheckpointFormatException} naming the file and the tensor. Values are read on use; close the checkpoint
 * after use.
 */
public final class QuantizedCheckpoint implements AutoCloseable {
    private final Checkpoint file;
    private final List<String> names;
    private final Set<String> quantized;

    private QuantizedCheckpoint(Checkpoint file) {
        this.file = file;
        Set<String> q = new LinkedHashSet<>();
        List<String> all = new ArrayList<>();
        Set<String> parts = new LinkedHashSet<>();
        for (String n : file.names()) {
            if (n.endsWith(".codes")) {
                String base = n.substring(0, n.length() - ".codes".length());
                if (file.metadata().containsKey(Export.PREFIX + "decode." + base)) {
                    q.add(base);
                    parts.add(base + ".codes");
                    parts.add(base + ".scales");
                    parts.add(base + ".zero_points");
                    parts.add(base + ".levels");
                }
            }
        }
        for (String n : file.names()) {
            if (!parts.contains(n)) {
                all.add(n);
            } else if (n.endsWith(".codes")) {
                all.add(n.substring(0, n.length() - ".codes".length()));
            }
        }
        this.names = Collections.unmodifiableList(all);
        this.quantized = Collections.unmodifiableSet(q);
    }

    /**
     * Opens an exported checkpoint (any safetensors file; see {@link Checkpoint#open} for the errors).
     *
     * @throws CheckpointFormatException if the file is malformed
     */
    public static QuantizedCheckpoint open(Path path) {
        return new QuantizedCheckpoint(Checkpoint.open(path));
    }

    /** The underlying checkpoint, with the parts ({@code NAME.codes}, {@code NAME.scales}, ...) as its tensors. */
    public Checkpoint checkpoint() {
        return file;
    }

    /** The source tensor names, in file order: quantized ones by their own name, and the copied ones. */
    public List<String> names() {
        return names;
    }

    /** True if {@code name} was exported as codes. */
    public boolean isQuantized(String name) {
        return quantized.contains(name);
    }

    /** The spec of a quantized tensor, parsed from its spec text; empty for copied tensors and specs without text. */
    public Optional<Quantizer> spec(String name) {
        String t = file.metadata().get(Export.PREFIX + "spec." + name);
        if (t == null || !quantized.contains(name)) {
            return Optional.empty();
        }
        try {
            return Optional.of(Quantizer.parse(t));
        } catch (SpecSyntaxException e) {
            throw refuse(name, "its spec text does not parse: " + e.getMessage());
        }
    }

    /** The spec label of a quantized tensor (present also for specs without a text form). */
    public Optional<String> label(String name) {
        return Optional.ofNullable(file.metadata().get(Export.PREFIX + "label." + name));
    }

    /** The codes of a quantized tensor in row-major order. */
    public int[] codes(String name) {
        Tensor c = part(name, "codes");
        float[] v = TensorAccess.data(c);
        int[] out = new int[v.length];
        for (int i = 0; i < v.length; i++) {
            out[i] = (int) v[i];
        }
        return out;
    }

    /** The scales as stored (broadcastable to the tensor's shape; the flat order of {@link Quantized#scales()}). */
    public Tensor scales(String name) {
        return part(name, "scales");
    }

    /** The zero points as stored, when the grid has them (asymmetric linear grids). */
    public Optional<Tensor> zeroPoints(String name) {
        requireQuantized(name);
        return file.contains(name + ".zero_points") ? Optional.of(file.tensor(name + ".zero_points"))
                : Optional.empty();
    }

    /** The level table as stored, for level-based grids. */
    public Optional<Tensor> levels(String name) {
        requireQuantized(name);
        return file.contains(name + ".levels") ? Optional.of(file.tensor(name + ".levels")) : Optional.empty();
    }

    /**
     * The values of tensor {@code name}: decoded from codes for quantized tensors (float32, bit for bit the values
     * the quantizer produced), or the stored tensor for copied ones.
     *
     * @throws CheckpointFormatException if the parts of a quantized tensor do not agree
     */
    public Tensor dequantized(String name) {
        Objects.requireNonNull(name, "name");
        if (!quantized.contains(name)) {
            return file.tensor(name);
        }
        String decode = file.metadata().get(Export.PREFIX + "decode." + name);
        Tensor codesT = part(name, "codes");
        int[] shape = codesT.shape();
        float[] codes = TensorAccess.data(codesT);
        Tensor scalesT = part(name, "scales");
        float[] scales = TensorAccess.data(scalesT);
        int[] ss = scalesT.shape();
        if (ss.length != shape.length) {
            throw refuse(name, "scales of rank " + ss.length + " for a tensor of rank " + shape.length);
        }
        int[] ratio = new int[shape.length];
        for (int k = 0; k < shape.length; k++) {
            if (ss[k] == 0 ? shape[k] != 0 : shape[k] % ss[k] != 0) {
                throw refuse(name, "scales shape " + Arrays.toString(ss) + " does not divide shape "
                        + Arrays.toString(shape));
            }
            ratio[k] = ss[k] == 0 ? 1 : shape[k] / ss[k];
        }
        float[] zps = null;
        Optional<Tensor> z = zeroPoints(name);
        if (z.isPresent()) {
            if (!Arrays.equals(z.get().shape(), ss)) {
                throw refuse(name, "zero points shape " + Arrays.toString(z.get().shape()) + " differs from the scales "
                        + Arrays.toString(ss));
            }
            zps = TensorAccess.data(z.get());
        }
        float[] table = null;
        int rows = 0;
        int k = 0;
        switch (decode) {
            case "affine":
            case "half-step":
            case "mxint8":
            case "fp16":
            case "bf16":
                break;
            case "table": {
                Tensor l = levels(name).orElseThrow(() -> refuse(name, "decode 'table' without a levels tensor"));
                int[] ls = l.shape();
                if (ls.length != 2 || ls[1] == 0 || ls[0] != 1 && ls[0] != scales.length) {
                    throw refuse(name, "levels shape " + Arrays.toString(ls) + " is neither [1, k] nor ["
                            + scales.length + ", k]");
                }
                table = TensorAccess.data(l);
                rows = ls[0];
                k = ls[1];
                break;
            }
            default:
                throw refuse(name, "unknown decode rule '" + decode + "'");
        }
        int n = codes.length;
        float[] out = new float[n];
        int rank = shape.length;
        int[] idx = new int[rank];
        int[] sstride = new int[rank];
        int st = 1;
        for (int a = rank - 1; a >= 0; a--) {
            sstride[a] = st;
            st *= ss[a];
        }
        for (int i = 0; i < n; i++) {
            int s = 0;
            for (int a = 0; a < rank; a++) {
                s += idx[a] / ratio[a] * sstride[a];
            }
            int code = (int) codes[i];
            double level;
            double zp = 0;
            switch (decode) {
                case "affine":
                    level = code;
                    zp = zps == null ? 0 : zps[s];
                    break;
                case "half-step":
                    level = code;
                    zp = -0.5;
                    break;
                case "mxint8":
                    level = code / 64.0;
                    break;
                case "fp16":
                    level = FloatFormat.F16.decode(code);
                    break;
                case "bf16":
                    level = FloatFormat.BF16.decode(code);
                    break;
                default:
                    if (code < 0 || code >= k) {
                        throw refuse(name, "code " + code + " at index " + i + " is outside the " + k
                                + "-entry level table");
                    }
                    level = table[(rows == 1 ? 0 : s) * k + code];
                    break;
            }
            out[i] = (float) ((double) scales[s] * (level - zp));
            for (int a = rank - 1; a >= 0; a--) {
                if (++idx[a] < shape[a]) {
                    break;
                }
                idx[a] = 0;
            }
        }
        DType origin = DType.fromSafetensorsName(file.metadata().getOrDefault(Export.PREFIX + "dtype." + name, "F32"))
                .orElse(DType.F32);
        return TensorAccess.wrap(out, shape, origin, name);
    }

    private void requireQuantized(String name) {
        if (!quantized.contains(name)) {
            throw new IllegalArgumentException(file.path() + ": tensor '" + name + "' is not a quantized tensor of"
                    + " this export" + (names.contains(name) ? " (it was copied unquantized)" : ""));
        }
    }

    private Tensor part(String name, String what) {
        requireQuantized(name);
        if (!file.contains(name + "." + what)) {
            throw refuse(name, "its part '" + name + "." + what + "' is missing");
        }
        return file.tensor(name + "." + what);
    }

    private CheckpointFormatException refuse(String name, String problem) {
        return new CheckpointFormatException(file.path(), name, "exported tensor: " + problem);
    }

    /** Closes the underlying checkpoint. */
    @Override
    public void close() {
        file.close();
    }

    @Override
    public String toString() {
        return "QuantizedCheckpoint " + file.path() + " (" + quantized.size() + " quantized of " + names.size()
                + " tensors)";
    }
}
