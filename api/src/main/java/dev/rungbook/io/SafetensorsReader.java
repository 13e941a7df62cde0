package dev.rungbook.io;

import com.google.gson.Strictness;
import com.google.gson.stream.JsonReader;
import com.google.gson.stream.JsonToken;
import dev.rungbook.tensor.DType;
import java.io.IOException;
import java.io.StringReader;
import java.nio.ByteBuffer;
import java.nio.ByteOrder;
import java.nio.channels.FileChannel;
import java.nio.file.Path;
import java.nio.file.StandardOpenOption;
import java.util.ArrayList;
import java.util.Arrays;
import java.util.Comparator;
import java.util.HashSet;
import java.util.List;
import java.util.Map;
import java.util.Set;
import java.util.stream.Collectors;

/**
 * Reads a safetensors file: an unsigned little-endian 64-bit header length N, N bytes of UTF-8 JSON describing each
 * tensor ({@code dtype}, {@code shape}, {@code data_offsets} relative to the data section) plus an optional
 * {@code __metadata__} string map, then the data section. Tensor data must tile the data section exactly: in order of
 * their offsets, each tensor starts where the previous one ends, the first at 0 and the last at the end of the file.
 */
final class SafetensorsReader {
    /** Largest header accepted: 100 MiB. */
    static final long HEADER_LIMIT = 100L << 20;
    static final String METADATA_KEY = "__metadata__";

    private SafetensorsReader() {
    }

    static Contents read(Path file) throws IOException {
        FileChannel ch = FileChannel.open(file, StandardOpenOption.READ);
        Contents c = new Contents("safetensors");
        c.resources.add(ch);
        c.files.add(file);
        try {
            readInto(file, ch, c);
            return c;
        } catch (RuntimeException | IOException e) {
            c.closeAll();
            throw e;
        }
    }

    /** Adds the file's tensors and metadata to {@code c}; {@code ch} stays owned by the caller. */
    static void readInto(Path file, FileChannel ch, Contents c) throws IOException {
        long size = ch.size();
        if (size < 8) {
            throw new CheckpointFormatException(file, null, "truncated: the file is " + size
                    + " bytes, too short for the 8-byte header length");
        }
        ByteBuffer lenBuf = ByteBuffer.allocate(8).order(ByteOrder.LITTLE_ENDIAN);
        readFully(ch, lenBuf, 0);
        long n = lenBuf.getLong(0);
        String nText = Long.toUnsignedString(n);
        if (Long.compareUnsigned(n, HEADER_LIMIT) > 0) {
            throw new CheckpointFormatException(file, null, "header length " + nText
                    + " bytes exceeds the limit of " + HEADER_LIMIT + " bytes (100 MiB); the file is " + size
                    + " bytes");
        }
        if (8 + n > size) {
            throw new CheckpointFormatException(file, null, "header length " + nText
                    + " bytes runs beyond the end of the file (" + size + " bytes): truncated or corrupt");
        }
        if (n < 2) {
            throw new CheckpointFormatException(file, null, "header length " + nText
                    + " bytes is too short for a JSON object");
        }
        ByteBuffer hb = ByteBuffer.allocate((int) n);
        readFully(ch, hb, 8);
        String json = Text.utf8(hb.array(), file, "header");
        if (json.charAt(0) != '{') {
            throw new CheckpointFormatException(file, null, "header does not start with '{' (first byte 0x"
                    + Integer.toHexString(hb.get(0) & 0xFF) + ")");
        }
        Text.checkJsonDepth(json, file, "header");
        long dataStart = 8 + n;
        long dataLen = size - dataStart;
        List<Raw> raws = parseHeader(file, json, c.metadata);
        validateLayout(file, raws, dataLen);
        for (Raw r : raws) {
            c.add(new Entry(file, r.name, r.dtype, r.shape, r.count) {
                @Override
                float[] read(int[] intShape) throws IOException {
                    float[] dst = new float[(int) count];
                    Decode.fromChannel(ch, dataStart + r.begin, dtype, ByteOrder.LITTLE_ENDIAN, dst);
                    return dst;
                }
            });
        }
    }

    static void readFully(FileChannel ch, ByteBuffer b, long pos) throws IOException {
        while (b.hasRemaining()) {
            int k = ch.read(b, pos + b.position());
            if (k < 0) {
                throw new java.io.EOFException("unexpected end of file");
            }
        }
    }

    /** A tensor's header entry before its layout is checked. */
    private static final class Raw {
        String name;
        DType dtype;
        long[] shape;
        long[] offsets;
        long count;
        long begin;
        long end;
    }

    private static List<Raw> parseHeader(Path file, String json, Map<String, String> metadata) {
        List<Raw> raws = new ArrayList<>();
        Set<String> seen = new HashSet<>();
        String current = null;
        try (JsonReader r = new JsonReader(new StringReader(json))) {
            r.setStrictness(Strictness.STRICT);
            r.beginObject();
            while (r.hasNext()) {
                String name = r.nextName();
                if (!seen.add(name)) {
                    throw new CheckpointFormatException(file, METADATA_KEY.equals(name) ? null : name,
                            METADATA_KEY.equals(name) ? "duplicate " + METADATA_KEY + " in header"
                                    : "duplicate tensor name in header");
                }
                if (METADATA_KEY.equals(name)) {
                    readMetadata(file, r, metadata);
                    continue;
                }
                current = name;
                raws.add(readTensor(file, name, r));
                current = null;
            }
            r.endObject();
            if (r.peek() != JsonToken.END_DOCUMENT) {
                throw new CheckpointFormatException(file, null, "invalid JSON header: text after the top-level object");
            }
        } catch (IOException | IllegalStateException | NumberFormatException e) {
            throw new CheckpointFormatException(file, current, "invalid JSON header: " + e.getMessage(), e);
        }
        return raws;
    }

    private static void readMetadata(Path file, JsonReader r, Map<String, String> metadata) throws IOException {
        if (r.peek() != JsonToken.BEGIN_OBJECT) {
            throw new CheckpointFormatException(file, null, METADATA_KEY + " is " + r.peek()
                    + ", expected an object of strings");
        }
        r.beginObject();
        while (r.hasNext()) {
            String k = r.nextName();
            if (r.peek() != JsonToken.STRING) {
                throw new CheckpointFormatException(file, null, METADATA_KEY + " value of '" + k + "' is "
                        + r.peek() + ", expected a string");
            }
            if (metadata.put(k, r.nextString()) != null) {
                throw new CheckpointFormatException(file, null, "duplicate key '" + k + "' in " + METADATA_KEY);
            }
        }
        r.endObject();
    }

    private static Raw readTensor(Path file, String name, JsonReader r) throws IOException {
        if (r.peek() != JsonToken.BEGIN_OBJECT) {
            throw new CheckpointFormatException(file, name, "header entry is " + r.peek() + ", expected an object");
        }
        Raw raw = new Raw();
        raw.name = name;
        String dtypeText = null;
        r.beginObject();
        while (r.hasNext()) {
            String key = r.nextName();
            switch (key) {
                case "dtype":
                    if (dtypeText != null || r.peek() != JsonToken.STRING) {
                        throw new CheckpointFormatException(file, name, dtypeText != null ? "duplicate key 'dtype'"
                                : "dtype is " + r.peek() + ", expected a string");
                    }
                    dtypeText = r.nextString();
                    break;
                case "shape":
                    if (raw.shape != null) {
                        throw new CheckpointFormatException(file, name, "duplicate key 'shape'");
                    }
                    raw.shape = integers(file, name, r, "shape", -1);
                    break;
                case "data_offsets":
                    if (raw.offsets != null) {
                        throw new CheckpointFormatException(file, name, "duplicate key 'data_offsets'");
                    }
                    raw.offsets = integers(file, name, r, "data_offsets", 2);
                    break;
                default:
                    throw new CheckpointFormatException(file, name, "unexpected key '" + key
                            + "' (expected dtype, shape, data_offsets)");
            }
        }
        r.endObject();
        if (dtypeText == null || raw.shape == null || raw.offsets == null) {
            throw new CheckpointFormatException(file, name, "header entry lacks "
                    + (dtypeText == null ? "dtype" : raw.shape == null ? "shape" : "data_offsets"));
        }
        raw.dtype = dtype(file, name, dtypeText);
        raw.count = Layout.elementCount(raw.shape);
        raw.begin = raw.offsets[0];
        raw.end = raw.offsets[1];
        return raw;
    }

    private static DType dtype(Path file, String name, String text) {
        for (DType t : DType.values()) {
            if (t.safetensorsName().equals(text)) {
                return t;
            }
        }
        throw new CheckpointFormatException(file, name, "unknown dtype '" + text + "' (supported: "
                + Arrays.stream(DType.values()).map(DType::safetensorsName).collect(Collectors.joining(", "))
                + ")");
    }

    /** A JSON array of non-negative integers; {@code exact} is the required length or -1. */
    private static long[] integers(Path file, String name, JsonReader r, String what, int exact) throws IOException {
        if (r.peek() != JsonToken.BEGIN_ARRAY) {
            throw new CheckpointFormatException(file, name, what + " is " + r.peek() + ", expected an array");
        }
        List<Long> values = new ArrayList<>();
        r.beginArray();
        while (r.hasNext()) {
            if (r.peek() != JsonToken.NUMBER) {
                throw new CheckpointFormatException(file, name, what + " holds " + r.peek()
                        + ", expected integers");
            }
            String text = r.nextString();
            if (text.startsWith("-")) {
                throw new CheckpointFormatException(file, name, "negative " + (what.equals("shape") ? "dimension"
                        : "offset") + " " + text + " in " + what);
            }
            if (!text.matches("[0-9]+")) {
                throw new CheckpointFormatException(file, name, what + " holds " + text
                        + ", expected a non-negative integer");
            }
            try {
                values.add(Long.parseLong(text));
            } catch (NumberFormatException e) {
                throw new CheckpointFormatException(file, name, what + " value " + text
                        + " overflows a 64-bit integer");
            }
            if (values.size() > 1024) {
                throw new CheckpointFormatException(file, name, what + " has more than 1024 entries");
            }
        }
        r.endArray();
        if (exact >= 0 && values.size() != exact) {
            throw new CheckpointFormatException(file, name, what + " has " + values.size() + " entries, expected "
                    + exact);
        }
        return values.stream().mapToLong(Long::longValue).toArray();
    }

    private static void validateLayout(Path file, List<Raw> raws, long dataLen) {
        for (Raw r : raws) {
            String offs = "data_offsets [" + r.begin + ", " + r.end + "]";
            if (r.count < 0) {
                throw new CheckpointFormatException(file, r.name, "shape " + Layout.shapeText(r.shape)
                        + " overflows: its element count exceeds 2^63-1");
            }
            long bytes = Layout.byteCount(r.count, r.dtype.byteSize());
            if (bytes < 0) {
                throw new CheckpointFormatException(file, r.name, "shape " + Layout.shapeText(r.shape) + " of "
                        + r.dtype + " overflows: its byte size exceeds 2^63-1");
            }
            if (r.begin > r.end) {
                throw new CheckpointFormatException(file, r.name, offs + " are misordered (begin after end)");
            }
            if (r.end > dataLen) {
                throw new CheckpointFormatException(file, r.name, offs + " run beyond the end of the data section ("
                        + dataLen + " bytes): the file is truncated or the offsets are wrong");
            }
            if (r.end - r.begin != bytes) {
                throw new CheckpointFormatException(file, r.name, "shape " + Layout.shapeText(r.shape) + " of "
                        + r.dtype + " needs " + bytes + " bytes but " + offs + " span " + (r.end - r.begin));
            }
        }
        List<Raw> sorted = new ArrayList<>(raws);
        sorted.sort(Comparator.<Raw>comparingLong(x -> x.begin).thenComparingLong(x -> x.end));
        long pos = 0;
        Raw prev = null;
        for (Raw r : sorted) {
            if (r.begin < pos) {
                throw new CheckpointFormatException(file, r.name, "data_offsets [" + r.begin + ", " + r.end
                        + "] overlap those of tensor '" + prev.name + "' [" + prev.begin + ", " + prev.end + "]");
            }
            if (r.begin > pos) {
                throw new CheckpointFormatException(file, r.name, "data_offsets [" + r.begin + ", " + r.end
                        + "] leave " + (r.begin - pos) + " unused bytes before them"
                        + (prev == null ? " at the start of the data section" : " after tensor '" + prev.name + "'"));
            }
            pos = r.end;
            prev = r;
        }
        if (pos != dataLen) {
            throw new CheckpointFormatException(file, null, "data section is " + dataLen + " bytes but the tensors"
                    + " cover only " + pos + " (" + (dataLen - pos) + " trailing bytes)");
        }
    }
}
