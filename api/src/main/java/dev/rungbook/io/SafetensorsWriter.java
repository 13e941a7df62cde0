package dev.rungbook.io;

import com.google.gson.Gson;
import com.google.gson.GsonBuilder;
import com.google.gson.JsonArray;
import com.google.gson.JsonObject;
import dev.rungbook.tensor.Tensor;
import java.io.IOException;
import java.nio.ByteBuffer;
import java.nio.ByteOrder;
import java.nio.channels.FileChannel;
import java.nio.charset.StandardCharsets;
import java.nio.file.Path;
import java.util.ArrayList;
import java.util.List;
import java.util.Map;
import java.util.SortedMap;

/**
 * Writes safetensors: the header lists {@code __metadata__} (when there is any) and then the tensors in name order;
 * their data follow in the same order, contiguous, starting at a multiple of 8 bytes (the header is padded with
 * spaces).
 */
final class SafetensorsWriter {
    private static final Gson GSON = new GsonBuilder().disableHtmlEscaping().create();

    private SafetensorsWriter() {
    }

    static byte[] header(SortedMap<String, Tensor> tensors, Map<String, String> metadata) {
        List<TensorInfo> slots = new ArrayList<>();
        for (Map.Entry<String, Tensor> e : tensors.entrySet()) {
            int[] shape = e.getValue().shape();
            long[] ls = new long[shape.length];
            for (int k = 0; k < shape.length; k++) {
                ls[k] = shape[k];
            }
            slots.add(TensorInfo.of(e.getKey(), e.getValue().dtype(), ls));
        }
        return header(slots, metadata);
    }

    /** The header for tensors laid out contiguously in the order of {@code slots}. */
    static byte[] header(List<TensorInfo> slots, Map<String, String> metadata) {
        JsonObject root = new JsonObject();
        if (!metadata.isEmpty()) {
            JsonObject m = new JsonObject();
            metadata.forEach(m::addProperty);
            root.add(SafetensorsReader.METADATA_KEY, m);
        }
        long offset = 0;
        for (TensorInfo slot : slots) {
            JsonObject o = new JsonObject();
            o.addProperty("dtype", slot.dtype().safetensorsName());
            JsonArray shape = new JsonArray();
            for (long d : slot.shape()) {
                shape.add(d);
            }
            o.add("shape", shape);
            long bytes = slot.byteSize();
            JsonArray offs = new JsonArray();
            offs.add(offset);
            offs.add(offset + bytes);
            o.add("data_offsets", offs);
            offset += bytes;
            root.add(slot.name(), o);
        }
        byte[] json = GSON.toJson(root).getBytes(StandardCharsets.UTF_8);
        int padded = (json.length + 8 + 7) / 8 * 8 - 8;
        byte[] out = new byte[8 + padded];
        ByteBuffer.wrap(out).order(ByteOrder.LITTLE_ENDIAN).putLong(padded);
        System.arraycopy(json, 0, out, 8, json.length);
        java.util.Arrays.fill(out, 8 + json.length, out.length, (byte) ' ');
        return out;
    }

    static void write(Path target, FileChannel ch, SortedMap<String, Tensor> tensors, Map<String, String> metadata)
            throws IOException {
        writeHeader(target, ch, header(tensors, metadata));
        for (Map.Entry<String, Tensor> e : tensors.entrySet()) {
            Encode.encode(target, e.getKey(), e.getValue(), piece -> writeAll(ch, piece));
        }
    }

    /** Writes a header made by {@link #header}, refusing one over the limit readers accept. */
    static void writeHeader(Path target, FileChannel ch, byte[] header) throws IOException {
        if (header.length - 8 > SafetensorsReader.HEADER_LIMIT) {
            throw new IllegalArgumentException(target + ": the header would be " + (header.length - 8)
                    + " bytes, over the " + SafetensorsReader.HEADER_LIMIT + "-byte limit readers accept");
        }
        writeAll(ch, ByteBuffer.wrap(header));
    }

    static void writeAll(FileChannel ch, ByteBuffer b) throws IOException {
        while (b.hasRemaining()) {
            ch.write(b);
        }
    }
}
