package dev.rungbook.plan;

import com.google.gson.Strictness;
import com.google.gson.stream.JsonReader;
import com.google.gson.stream.JsonToken;
import com.google.gson.stream.JsonWriter;
import dev.rungbook.internal.AtomicFile;
import java.io.IOException;
import java.io.StringReader;
import java.io.StringWriter;
import java.io.UncheckedIOException;
import java.nio.ByteBuffer;
import java.nio.charset.CharacterCodingException;
import java.nio.charset.CodingErrorAction;
import java.nio.charset.StandardCharsets;
import java.nio.file.Files;
import java.nio.file.NoSuchFileException;
import java.nio.file.Path;
import java.util.ArrayList;
import java.util.HashSet;
import java.util.LinkedHashMap;
import java.util.List;
import java.util.Map;
import java.util.Set;

/**
 * The plan file format, version 1: UTF-8 JSON of one object.
 *
 * <pre>{@code
 * {
 *   "rungbook_plan": 1,
 *   "layers": [
 *     {"layer": "fc1", "spec": "int4 sym per-channel(0)"},
 *     {"layer": "fc2", "spec": "int8 sym per-channel(0)"}
 *   ],
 *   "info": {"budget_bytes": "40960"}
 * }
 * }</pre>
 *
 * {@code rungbook_plan} (the format version, the integer 1) and {@code layers} (in order; layer names non-blank, on
 * one line and distinct; {@code spec} a spec text) are required; {@code info} (string values only) is optional. Any
 * other field, a duplicate field, trailing content, or a file above {@link #MAX_BYTES} is refused. Reading never
 * skips over values, so hostile nesting is refused at its first bracket. Package-private: {@link Plan} reads and
 * writes through here.
 */
final class PlanFile {
    /** The format version this code reads and writes. */
    static final int VERSION = 1;
    /** The largest plan file accepted. */
    static final long MAX_BYTES = 16L << 20;

    /** One layer of a plan file, with its spec as text. */
    record Entry(String layer, String spec) {
    }

    /** The parsed content of a plan file. */
    record Contents(List<Entry> layers, Map<String, String> info) {
    }

    private PlanFile() {
    }

    /** Reads and checks a plan file. */
    static Contents read(Path file) {
        byte[] bytes;
        try {
            long size = Files.size(file);
            if (size > MAX_BYTES) {
                throw new PlanFormatException(file, null, "file of " + size + " bytes is larger than the "
                        + MAX_BYTES + " bytes a plan may take");
            }
            bytes = Files.readAllBytes(file);
        } catch (NoSuchFileException e) {
            throw new UncheckedIOException(file + ": no such plan file", e);
        } catch (IOException e) {
            throw new UncheckedIOException(file + ": cannot read the plan file: " + e.getMessage(), e);
        }
        return parse(bytes, file);
    }

    /** Parses plan file bytes; {@code file} names the source in messages. */
    static Contents parse(byte[] bytes, Path file) {
        if (bytes.length > MAX_BYTES) {
            throw new PlanFormatException(file, null, "larger than the " + MAX_BYTES + " bytes a plan may take");
        }
        String text;
        try {
            text = StandardCharsets.UTF_8.newDecoder().onMalformedInput(CodingErrorAction.REPORT)
                    .onUnmappableCharacter(CodingErrorAction.REPORT).decode(ByteBuffer.wrap(bytes)).toString();
        } catch (CharacterCodingException e) {
            throw new PlanFormatException(file, null, "not valid UTF-8 text");
        }
        if (text.isBlank()) {
            throw new PlanFormatException(file, null, "empty file; a plan is a JSON object with \"rungbook_plan\": "
                    + VERSION + " and \"layers\"");
        }
        try (JsonReader r = new JsonReader(new StringReader(text))) {
            r.setStrictness(Strictness.STRICT);
            Contents c = readTop(r, file);
            if (r.peek() != JsonToken.END_DOCUMENT) {
                throw new PlanFormatException(file, null, "content after the plan object (" + where(r) + ")");
            }
            return c;
        } catch (PlanFormatException e) {
            throw e;
        } catch (IOException | IllegalStateException | NumberFormatException e) {
            // gson's MalformedJsonException is an IOException; its message gives line and column.
            throw new PlanFormatException(file, null, "malformed JSON: " + gsonMessage(e), e);
        }
    }

    /** gson's message without its advice to turn strictness off or its troubleshooting link. */
    private static String gsonMessage(Exception e) {
        String m = String.valueOf(e.getMessage());
        int nl = m.indexOf('\n');
        if (nl >= 0) {
            m = m.substring(0, nl);
        }
        return m.replace("Use JsonReader.setStrictness(Strictness.LENIENT) to accept malformed JSON",
                "not strict JSON").trim();
    }

    private static Contents readTop(JsonReader r, Path file) throws IOException {
        expect(r, JsonToken.BEGIN_OBJECT, file, null, "a JSON object");
        r.beginObject();
        Set<String> seen = new HashSet<>();
        Integer version = null;
        List<Entry> layers = null;
        Map<String, String> info = new LinkedHashMap<>();
        while (r.hasNext()) {
            String name = r.nextName();
            if (!seen.add(name)) {
                throw new PlanFormatException(file, name, "appears twice");
            }
            switch (name) {
                case "rungbook_plan":
                    version = readVersion(r, file);
                    break;
                case "layers":
                    layers = readLayers(r, file);
                    break;
                case "info":
                    info = readInfo(r, file);
                    break;
                default:
                    throw new PlanFormatException(file, name, "unknown field; a plan has rungbook_plan, layers and "
                            + "info");
            }
        }
        r.endObject();
        if (version == null) {
            throw new PlanFormatException(file, "rungbook_plan", "missing; it gives the format version ("
                    + VERSION + ")");
        }
        if (layers == null) {
            throw new PlanFormatException(file, "layers", "missing; it lists {\"layer\": ..., \"spec\": ...} "
                    + "objects");
        }
        return new Contents(List.copyOf(layers), info);
    }

    private static int readVersion(JsonReader r, Path file) throws IOException {
        expect(r, JsonToken.NUMBER, file, "rungbook_plan", "the integer " + VERSION);
        String v = r.nextString();
        if (!v.equals(Integer.toString(VERSION))) {
            throw new PlanFormatException(file, "rungbook_plan", "version " + v + " is not supported; this "
                    + "Rungbook reads version " + VERSION);
        }
        return VERSION;
    }

    private static List<Entry> readLayers(JsonReader r, Path file) throws IOException {
        expect(r, JsonToken.BEGIN_ARRAY, file, "layers", "an array");
        r.beginArray();
        List<Entry> out = new ArrayList<>();
        Set<String> names = new HashSet<>();
        while (r.hasNext()) {
            String at = "layers[" + out.size() + "]";
            expect(r, JsonToken.BEGIN_OBJECT, file, at, "an object {\"layer\": ..., \"spec\": ...}");
            r.beginObject();
            String layer = null;
            String spec = null;
            while (r.hasNext()) {
                String name = r.nextName();
                String field = at + "." + name;
                if (name.equals("layer")) {
                    if (layer != null) {
                        throw new PlanFormatException(file, field, "appears twice");
                    }
                    layer = readString(r, file, field);
                    if (layer.isBlank() || layer.indexOf('\n') >= 0 || layer.indexOf('\r') >= 0) {
                        throw new PlanFormatException(file, field, "layer name '" + layer + "' must be non-blank "
                                + "and on one line");
                    }
                } else if (name.equals("spec")) {
                    if (spec != null) {
                        throw new PlanFormatException(file, field, "appears twice");
                    }
                    spec = readString(r, file, field);
                } else {
                    throw new PlanFormatException(file, field, "unknown field; a layer has layer and spec");
                }
            }
            r.endObject();
            if (layer == null) {
                throw new PlanFormatException(file, at + ".layer", "missing");
            }
            if (spec == null) {
                throw new PlanFormatException(file, at + ".spec", "missing (layer '" + layer + "')");
            }
            if (!names.add(layer)) {
                throw new PlanFormatException(file, at + ".layer", "layer '" + layer + "' is planned twice");
            }
            out.add(new Entry(layer, spec));
        }
        r.endArray();
        return out;
    }

    private static Map<String, String> readInfo(JsonReader r, Path file) throws IOException {
        expect(r, JsonToken.BEGIN_OBJECT, file, "info", "an object of strings");
        r.beginObject();
        Map<String, String> out = new LinkedHashMap<>();
        while (r.hasNext()) {
            String key = checkText(r.nextName(), file, "info");
            if (out.containsKey(key)) {
                throw new PlanFormatException(file, "info." + key, "appears twice");
            }
            out.put(key, readString(r, file, "info." + key));
        }
        r.endObject();
        return out;
    }

    private static String readString(JsonReader r, Path file, String field) throws IOException {
        expect(r, JsonToken.STRING, file, field, "a string");
        return checkText(r.nextString(), file, field);
    }

    /** Refuses a string with an unpaired surrogate (a JSON escape of half a character pair). */
    private static String checkText(String s, Path file, String field) {
        for (int i = 0; i < s.length(); i++) {
            char c = s.charAt(i);
            if (Character.isHighSurrogate(c) && i + 1 < s.length() && Character.isLowSurrogate(s.charAt(i + 1))) {
                i++;
            } else if (Character.isSurrogate(c)) {
                throw new PlanFormatException(file, field, String.format(java.util.Locale.ROOT, "unpaired "
                        + "surrogate \\u%04x at character %d is not text", (int) c, i));
            }
        }
        return s;
    }

    private static void expect(JsonReader r, JsonToken want, Path file, String field, String what)
            throws IOException {
        JsonToken got = r.peek();
        if (got != want) {
            throw new PlanFormatException(file, field, "expected " + what + ", found " + describe(got) + " ("
                    + where(r) + ")");
        }
    }

    private static String describe(JsonToken t) {
        switch (t) {
            case BEGIN_ARRAY:
                return "an array";
            case BEGIN_OBJECT:
                return "an object";
            case STRING:
                return "a string";
            case NUMBER:
                return "a number";
            case BOOLEAN:
                return "a boolean";
            case NULL:
                return "null";
            case END_DOCUMENT:
                return "the end of the file";
            default:
                return t.name().toLowerCase(java.util.Locale.ROOT).replace('_', ' ');
        }
    }

    private static String where(JsonReader r) {
        // JsonReader.toString() ends with " at line L column C path $..."; keep that part.
        String s = r.toString();
        int i = s.indexOf(" at line ");
        return i < 0 ? s : s.substring(i + 1);
    }

    /** The file's bytes: pretty-printed UTF-8 JSON with a final newline. */
    static byte[] format(Contents c) {
        StringWriter out = new StringWriter();
        try (JsonWriter w = new JsonWriter(out)) {
            w.setIndent("  ");
            w.beginObject();
            w.name("rungbook_plan").value(VERSION);
            w.name("layers").beginArray();
            for (Entry e : c.layers()) {
                w.beginObject().name("layer").value(e.layer()).name("spec").value(e.spec()).endObject();
            }
            w.endArray();
            if (!c.info().isEmpty()) {
                w.name("info").beginObject();
                for (Map.Entry<String, String> e : c.info().entrySet()) {
                    w.name(e.getKey()).value(e.getValue());
                }
                w.endObject();
            }
            w.endObject();
        } catch (IOException e) {
            throw new UncheckedIOException(e);
        }
        return (out + "\n").getBytes(StandardCharsets.UTF_8);
    }

    /** Writes the plan file atomically. */
    static void write(Path file, Contents c) {
        try {
            AtomicFile.write(file, format(c));
        } catch (IOException e) {
            throw new UncheckedIOException(file + ": cannot write the plan file: " + e.getMessage(), e);
        }
    }
}
