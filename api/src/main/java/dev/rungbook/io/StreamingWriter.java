package dev.rungbook.io;

import dev.rungbook.internal.AtomicFile;
import dev.rungbook.tensor.DType;
import dev.rungbook.tensor.Tensor;
import java.io.IOException;
import java.io.UncheckedIOException;
import java.nio.ByteBuffer;
import java.nio.channels.FileChannel;
import java.nio.file.Path;
import java.util.Arrays;
import java.util.HashSet;
import java.util.List;
import java.util.Locale;
import java.util.Map;
import java.util.Objects;
import java.util.Set;

/**
 * Writes a safetensors file one tensor at a time, so that a checkpoint larger than memory can be converted: the
 * tensors are declared first ({@link TensorInfo#of}: name, dtype, shape), the header is written from them, and then a
 * {@link Producer} hands over each tensor's values in the declared order, which are written and can be forgotten.
 *
 * <pre>{@code
 * StreamingWriter.write(out, List.of(TensorInfo.of("w.codes", DType.I8, 4, 8), TensorInfo.of("w.scales", DType.F32, 4, 1)),
 *         Map.of("note", "example"), sink -> {
 *             sink.put("w.codes", littleEndianBytes);   // exactly 32 bytes
 *             sink.put("w.scales", scales);             // a Tensor of shape [4, 1], encoded as F32
 *         });
 * }</pre>
 *
 * <p>The header lists {@code __metadata__} (when there is any) and then the tensors in the declared order, data
 * contiguous in that order from a multiple of 8 bytes, as {@link Checkpoint#write} does. The write is atomic
 * ({@link AtomicFile}); if the producer throws, or does not hand over every declared tensor in order with the declared
 * size, the target is left as it was and the error names the tensor. A file that an open {@link Checkpoint} reads is
 * never replaced.
 */
public final class StreamingWriter {
    private StreamingWriter() {
    }

    /** Hands the declared tensors over to a {@link Sink}, in order. */
    @FunctionalInterface
    public interface Producer {
        /** Calls {@code sink.put} once per declared slot, in the declared order. */
        void produce(Sink sink);
    }

    /** Receives the tensors' values; each call writes one declared slot (the next one in order). */
    public interface Sink {
        /**
         * Writes {@code values} (shape must equal the slot's) encoded as the slot's dtype, with the rules of
         * {@link Checkpoint#write} (floats round to nearest even; integers must be exact and in range).
         */
        void put(String name, Tensor values);

        /** Writes raw little-endian bytes; {@code bytes.remaining()} must equal the slot's byte size. */
        void put(String name, ByteBuffer bytes);
    }

    /**
     * Writes {@code file} (a {@code .safetensors} path) from the declared slots and what {@code producer} hands over.
     *
     * @throws IllegalArgumentException for another extension, duplicate or reserved names, a null metadata key or value,
     *     or a tensor handed over out of order or with the wrong size (naming it)
     * @throws IllegalStateException if {@code file} is open as a checkpoint input, or the producer left slots unwritten
     * @throws UncheckedIOException if writing fails
     */
    public static void write(Path file, List<TensorInfo> slots, Map<String, String> metadata, Producer producer) {
        Objects.requireNonNull(file, "file");
        Objects.requireNonNull(slots, "slots");
        Objects.requireNonNull(producer, "producer");
        Map<String, String> meta = metadata == null ? Map.of() : metadata;
        if (!file.getFileName().toString().toLowerCase(Locale.ROOT).endsWith(".safetensors")) {
            throw new IllegalArgumentException(file + ": a streamed checkpoint is written as .safetensors");
        }
        Set<String> names = new HashSet<>();
        for (TensorInfo s : slots) {
            Objects.requireNonNull(s, "slot");
            if (s.name().equals(SafetensorsReader.METADATA_KEY)) {
                throw new IllegalArgumentException(file + ": tensor name '" + s.name() + "' is reserved for metadata");
            }
            if (!names.add(s.name())) {
                throw new IllegalArgumentException(file + ": tensor '" + s.name() + "' is declared twice");
            }
        }
        meta.forEach((k, v) -> {
            Objects.requireNonNull(k, "metadata key");
            Objects.requireNonNull(v, () -> "metadata value of '" + k + "'");
        });
        if (OpenInputs.isOpen(file)) {
            throw new IllegalStateException(file + ": refusing to overwrite a file that an open Checkpoint reads;"
                    + " close it first or write elsewhere");
        }
        byte[] header = SafetensorsWriter.header(slots, meta);
        try {
            AtomicFile.write(file, ch -> {
                SafetensorsWriter.writeHeader(file, ch, header);
                ChannelSink sink = new ChannelSink(file, ch, slots);
                producer.produce(sink);
                if (sink.next != slots.size()) {
                    throw new IllegalStateException(file + ": " + sink.next + " of " + slots.size()
                            + " declared tensors were written; next missing: '" + slots.get(sink.next).name() + "'");
                }
            });
        } catch (IOException e) {
            throw new UncheckedIOException(file + ": could not write: " + e.getMessage(), e);
        }
    }

    /** Checks each hand-over against the next slot and writes it to the channel. */
    private static final class ChannelSink implements Sink {
        private final Path file;
        private final FileChannel ch;
        private final List<TensorInfo> slots;
        int next;

        ChannelSink(Path file, FileChannel ch, List<TensorInfo> slots) {
            this.file = file;
            this.ch = ch;
            this.slots = slots;
        }

        private TensorInfo expect(String name) {
            if (next >= slots.size()) {
                throw new IllegalArgumentException(file + ": tensor '" + name + "' handed over after all "
                        + slots.size() + " declared tensors were written");
            }
            TensorInfo s = slots.get(next);
            if (!s.name().equals(name)) {
                throw new IllegalArgumentException(file + ": tensor '" + name + "' handed over where '" + s.name()
                        + "' was declared next");
            }
            return s;
        }

        @Override
        public void put(String name, Tensor values) {
            TensorInfo s = expect(name);
            int[] shape = values.shape();
            long[] ls = new long[shape.length];
            for (int k = 0; k < shape.length; k++) {
                ls[k] = shape[k];
            }
            if (!Arrays.equals(ls, s.shape())) {
                throw new IllegalArgumentException(file + ": tensor '" + name + "' has shape "
                        + Arrays.toString(shape) + ", declared " + Arrays.toString(s.shape()));
            }
            try {
                Encode.encode(file, name, values.withDType(s.dtype()), piece -> SafetensorsWriter.writeAll(ch, piece));
            } catch (IOException e) {
                throw new UncheckedIOException(file + ": could not write tensor '" + name + "': " + e.getMessage(), e);
            }
            next++;
        }

        @Override
        public void put(String name, ByteBuffer bytes) {
            TensorInfo s = expect(name);
            if (bytes.remaining() != s.byteSize()) {
                throw new IllegalArgumentException(file + ": tensor '" + name + "' handed over " + bytes.remaining()
                        + " bytes, declared " + s.byteSize() + " (" + s + ")");
            }
            try {
                SafetensorsWriter.writeAll(ch, bytes.duplicate());
            } catch (IOException e) {
                throw new UncheckedIOException(file + ": could not write tensor '" + name + "': " + e.getMessage(), e);
            }
            next++;
        }
    }
}
