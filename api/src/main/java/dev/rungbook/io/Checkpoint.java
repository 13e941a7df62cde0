package dev.rungbook.io;

import dev.rungbook.tensor.DType;
import dev.rungbook.tensor.Tensor;
import java.io.IOException;
import java.io.UncheckedIOException;
import java.lang.ref.Cleaner;
import java.nio.file.Files;
import java.nio.file.NoSuchFileException;
import java.nio.file.Path;
import java.util.ArrayList;
import java.util.Collections;
import java.util.Comparator;
import java.util.LinkedHashMap;
import java.util.List;
import java.util.Locale;
import java.util.Map;
import java.util.Objects;
import java.util.TreeMap;
import java.util.stream.Collectors;

/**
 * A checkpoint file opened for reading: named tensors and a string metadata map.
 *
 * <h2>Formats</h2>
 * {@link #open} chooses the reader by magic bytes and extension:
 * <ul>
 *   <li><b>safetensors</b> ({@code .safetensors}): every {@link DType}; the {@code __metadata__} map; data memory-mapped
 *       read-only. A sharded checkpoint opens through its index ({@code *.safetensors.index.json}, whose
 *       {@code weight_map} maps each tensor to a shard file in the same folder) as one checkpoint.</li>
 *   <li><b>NumPy .npy</b>: format versions 1.0, 2.0 and 3.0, little- and big-endian, C and Fortran order (Fortran data
 *       are reordered to row-major), dtypes f8 f4 f2 i8 i4 i2 i1 u1 b1. The one array is named after the file's stem
 *       ({@code bias.npy} holds {@code bias}). Object arrays and anything that would need unpickling are refused.</li>
 *   <li><b>NumPy .npz</b>: a zip of .npy members, stored or deflated, named by their member names without {@code .npy}.
 *       Protected against zip bombs: a member's data may not exceed what its compressed bytes can inflate to.</li>
 * </ul>
 *
 * <h2>Values</h2>
 * Tensors are lazy: {@link #tensor} returns at once, and the bytes are read and converted to float32 on first use of the
 * values. Integer types, F16, BF16 and the 8-bit floats convert exactly; F64 rounds to nearest even; I64 and I32
 * values beyond 2^24 in magnitude round to the nearest float32; BOOL gives 0 or 1 (any non-zero byte is 1). NaN and
 * infinity load as they are. The tensor's {@link Tensor#dtype()} is the stored type. Values must be read before the
 * checkpoint is closed (or the tensor's first use throws {@link IllegalStateException}); a checkpoint that becomes
 * unreachable is closed for you.
 *
 * <h2>Errors</h2>
 * A malformed or hostile file gives a {@link CheckpointFormatException} naming the file, the tensor when there is one,
 * and the problem: truncation, a header length beyond the file or over 100 MiB, invalid UTF-8 or JSON, JSON nested
 * deeper than 64 levels, unknown dtypes, offsets out of range, overlapping, misordered or gapped data, shape/size
 * mismatch, negative or overflowing dimensions, duplicate names, a missing shard. Reading never allocates from an
 * unchecked length field and never modifies the file. A tensor with more than {@link Tensor#MAX_ELEMENTS} elements is
 * listed by {@link #names()} and described by {@link #info}, and {@link #tensor} refuses it. I/O failures surface as
 * {@link UncheckedIOException} naming the file.
 *
 * <h2>Writing</h2>
 * {@link #write} writes safetensors or .npz atomically; see there.
 */
public final class Checkpoint implements AutoCloseable {
    private static final int SUGGESTIONS = 5;

    private final Path path;
    private final String format;
    private final Map<String, Entry> entries;
    private final Map<String, String> metadata;
    private final State state;
    private final Cleaner.Cleanable cleanable;

    /** The closeable part, kept apart from the checkpoint so that the cleaner does not hold the checkpoint alive. */
    private static final class State implements Runnable {
        private final Contents contents;
        private final List<Object> inputKeys;
        private volatile boolean closed;

        State(Contents contents, List<Object> inputKeys) {
            this.contents = contents;
            this.inputKeys = inputKeys;
        }

        @Override
        public synchronized void run() {
            if (closed) {
                return;
            }
            closed = true;
            inputKeys.forEach(OpenInputs::remove);
            contents.closeAll();
        }
    }

    private static final class CleanerHolder {
        static final Cleaner CLEANER = Cleaner.create();
    }

    private Checkpoint(Path path, Contents c, List<Object> keys) {
        this.path = path;
        this.format = c.format;
        this.entries = Collections.unmodifiableMap(new LinkedHashMap<>(c.entries));
        this.metadata = Collections.unmodifiableMap(new LinkedHashMap<>(c.metadata));
        this.state = new State(c, keys);
        this.cleanable = CleanerHolder.CLEANER.register(this, state);
    }

    /**
     * Opens a checkpoint for reading (see the class documentation for formats and errors). The headers are read and
     * checked now; tensor values are read when used.
     *
     * @throws CheckpointFormatException if the file is malformed
     * @throws UncheckedIOException if it cannot be read (for example it does not exist)
     */
    public static Checkpoint open(Path file) {
        Objects.requireNonNull(file, "file");
        try {
            if (Files.isDirectory(file)) {
                throw new UncheckedIOException(new IOException(file + ": is a directory, not a checkpoint file"));
            }
            Formats.Format f = Formats.choose(file);
            Contents c = f.reader.read(file);
            List<Object> keys = new ArrayList<>();
            try {
                for (Path p : c.files) {
                    keys.add(OpenInputs.key(p));
                }
            } catch (IOException | RuntimeException e) {
                c.closeAll();
                throw e;
            }
            keys.forEach(OpenInputs::add);
            return new Checkpoint(file, c, keys);
        } catch (NoSuchFileException e) {
            throw new UncheckedIOException(file + ": no such file", e);
        } catch (IOException e) {
            throw new UncheckedIOException(file + ": could not read: " + e.getMessage(), e);
        }
    }

    /** The path given to {@link #open}. */
    public Path path() {
        return path;
    }

    /** The format read: {@code safetensors}, {@code safetensors (sharded)}, {@code npy} or {@code npz}. */
    public String format() {
        return format;
    }

    /** The tensor names in file order (for a sharded checkpoint, the index's order). */
    public List<String> names() {
        return List.copyOf(entries.keySet());
    }

    /** True if the checkpoint holds a tensor of that name. */
    public boolean contains(String name) {
        return entries.containsKey(name);
    }

    /** Name, stored dtype and shape of a tensor, without reading its values. */
    public TensorInfo info(String name) {
        Entry e = entry(name);
        return new TensorInfo(e.name, e.dtype, e.shape, e.count);
    }

    /**
     * The tensor of that name, lazy: its values are read and converted to float32 on first use, which must happen
     * before {@link #close()}. Each call returns a new tensor that reads the file again when used.
     *
     * @throws IllegalArgumentException if there is no such tensor (the message lists the closest names)
     * @throws CheckpointFormatException if the tensor holds more than {@link Tensor#MAX_ELEMENTS} elements, or a
     *     dimension exceeds {@link Integer#MAX_VALUE}
     */
    public Tensor tensor(String name) {
        Entry e = entry(name);
        TensorInfo info = info(name);
        if (!info.fitsInTensor()) {
            throw new CheckpointFormatException(e.file, name, "shape " + Layout.shapeText(e.shape) + " holds "
                    + e.count + " elements, more than the " + Tensor.MAX_ELEMENTS
                    + " one tensor can hold (or a dimension over 2^31-1); it is listed, but cannot be loaded whole");
        }
        int[] shape = new int[e.shape.length];
        for (int k = 0; k < shape.length; k++) {
            shape[k] = (int) e.shape[k];
        }
        return Tensor.lazy(name, e.dtype, shape, () -> load(e, shape));
    }

    private float[] load(Entry e, int[] shape) {
        if (state.closed) {
            throw new IllegalStateException(e.file + ": tensor '" + e.name + "': the checkpoint was closed before"
                    + " the tensor's values were read; use the tensor before close(), or keep the checkpoint open");
        }
        try {
            return e.read(shape);
        } catch (IOException ex) {
            throw new UncheckedIOException(e.file + ": tensor '" + e.name + "': could not read: " + ex.getMessage(),
                    ex);
        }
    }

    private Entry entry(String name) {
        Objects.requireNonNull(name, "name");
        Entry e = entries.get(name);
        if (e == null) {
            throw new IllegalArgumentException(path + ": no tensor '" + name + "'; " + suggestions(name));
        }
        return e;
    }

    private String suggestions(String name) {
        if (entries.isEmpty()) {
            return "the checkpoint holds no tensors";
        }
        List<String> close = entries.keySet().stream()
                .sorted(Comparator.comparingInt((String k) -> distance(name, k)).thenComparing(k -> k))
                .limit(SUGGESTIONS)
                .map(k -> "'" + k + "'")
                .collect(Collectors.toList());
        return "it holds " + entries.size() + " tensor" + (entries.size() == 1 ? "" : "s") + ", closest: "
                + String.join(", ", close);
    }

    /** Levenshtein distance on at most the first 64 characters of each string (enough to rank suggestions). */
    private static int distance(String a, String b) {
        a = a.length() > 64 ? a.substring(0, 64) : a;
        b = b.length() > 64 ? b.substring(0, 64) : b;
        int[] prev = new int[b.length() + 1];
        int[] cur = new int[b.length() + 1];
        for (int j = 0; j <= b.length(); j++) {
            prev[j] = j;
        }
        for (int i = 1; i <= a.length(); i++) {
            cur[0] = i;
            for (int j = 1; j <= b.length(); j++) {
                int sub = prev[j - 1] + (a.charAt(i - 1) == b.charAt(j - 1) ? 0 : 1);
                cur[j] = Math.min(sub, Math.min(prev[j], cur[j - 1]) + 1);
            }
            int[] t = prev;
            prev = cur;
            cur = t;
        }
        return prev[b.length()];
    }

    /** The file's string metadata (safetensors {@code __metadata__}); empty when there is none. Unmodifiable. */
    public Map<String, String> metadata() {
        return metadata;
    }

    /** True once {@link #close()} has run. */
    public boolean isClosed() {
        return state.closed;
    }

    /** Releases the file; tensors whose values were not yet read can no longer be. Idempotent. */
    @Override
    public void close() {
        cleanable.clean();
    }

    /** For example {@code Checkpoint model.safetensors (safetensors, 12 tensors)}. */
    @Override
    public String toString() {
        return "Checkpoint " + path + " (" + format + ", " + entries.size() + " tensor"
                + (entries.size() == 1 ? "" : "s") + (state.closed ? ", closed" : "") + ")";
    }

    /** Writes tensors without metadata; see {@link #write(Path, Map, Map)}. */
    public static void write(Path file, Map<String, Tensor> tensors) {
        write(file, tensors, Map.of());
    }

    /**
     * Writes a checkpoint, choosing the format by extension: {@code .safetensors} or {@code .npz}.
     *
     * <p>Each tensor is written as its dtype tag ({@link Tensor#withDType}): F32, F64, F16, BF16, F8_E4M3 and F8_E5M2
     * round to nearest even (F32 and F64 exactly), so that reading back gives bit-identical values for values already
     * on the type's grid; a finite value that would overflow the type is refused rather than turned into infinity or
     * NaN. Integer and BOOL tags write integers only when every value is an exact integer in range (BOOL: 0 or 1).
     * Tensors are written in name order. safetensors: the header holds {@code metadata} as {@code __metadata__} and
     * the data start at a multiple of 8 bytes. .npz: stored (uncompressed) .npy members; NumPy has no BF16 or 8-bit
     * float type and .npz no metadata, so those are refused.
     *
     * <p>The write is atomic: the content goes to a temporary file in the same folder, is forced to disk and renamed
     * over {@code file}; on failure the temporary file is deleted and an existing {@code file} is left as it was. A
     * file that an open {@link Checkpoint} reads is never replaced (close it first).
     *
     * @throws IllegalArgumentException for an unknown extension, a name or value the format cannot hold
     * @throws IllegalStateException if {@code file} is open as a checkpoint input
     * @throws UncheckedIOException if writing fails
     */
    public static void write(Path file, Map<String, Tensor> tensors, Map<String, String> metadata) {
        Objects.requireNonNull(file, "file");
        Objects.requireNonNull(tensors, "tensors");
        Map<String, String> meta = metadata == null ? Map.of() : metadata;
        String lower = file.getFileName().toString().toLowerCase(Locale.ROOT);
        boolean npz;
        if (lower.endsWith(".safetensors")) {
            npz = false;
        } else if (lower.endsWith(".npz")) {
            npz = true;
        } else {
            throw new IllegalArgumentException(file + ": cannot tell the format to write from the extension"
                    + " (use .safetensors or .npz)");
        }
        TreeMap<String, Tensor> sorted = new TreeMap<>();
        for (Map.Entry<String, Tensor> e : tensors.entrySet()) {
            String name = Objects.requireNonNull(e.getKey(), "tensor name");
            Tensor t = Objects.requireNonNull(e.getValue(), () -> "tensor '" + name + "'");
            if (!npz && name.equals(SafetensorsReader.METADATA_KEY)) {
                throw new IllegalArgumentException(file + ": tensor name '" + name + "' is reserved for metadata");
            }
            if (npz && name.isEmpty()) {
                throw new IllegalArgumentException(file + ": .npz members need a non-empty name");
            }
            if (npz && t.dtype().numpyCode().isEmpty()) {
                throw new IllegalArgumentException(file + ": tensor '" + name + "': NumPy has no " + t.dtype()
                        + " type; write .safetensors, or tag the tensor with another dtype (withDType)");
            }
            sorted.put(name, t);
        }
        meta.forEach((k, v) -> {
            Objects.requireNonNull(k, "metadata key");
            Objects.requireNonNull(v, () -> "metadata value of '" + k + "'");
        });
        if (npz && !meta.isEmpty()) {
            throw new IllegalArgumentException(file + ": .npz cannot hold metadata (" + meta.size()
                    + " entries given); write .safetensors to keep it");
        }
        if (OpenInputs.isOpen(file)) {
            throw new IllegalStateException(file + ": refusing to overwrite a file that an open Checkpoint reads;"
                    + " close it first or write elsewhere");
        }
        try {
            AtomicFile.write(file, ch -> {
                if (npz) {
                    NpzWriter.write(file, ch, sorted);
                } else {
                    SafetensorsWriter.write(file, ch, sorted, meta);
                }
            });
        } catch (IOException e) {
            throw new UncheckedIOException(file + ": could not write: " + e.getMessage(), e);
        }
    }
}
