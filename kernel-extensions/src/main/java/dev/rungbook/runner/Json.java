package dev.rungbook.runner;

import com.google.gson.Gson;
import com.google.gson.GsonBuilder;
import com.google.gson.JsonArray;
import com.google.gson.JsonElement;
import com.google.gson.JsonNull;
import com.google.gson.JsonObject;
import com.google.gson.JsonPrimitive;
import dev.rungbook.internal.AtomicFile;
import java.io.IOException;
import java.nio.charset.StandardCharsets;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.Collection;
import java.util.Map;

/** JSON and file helpers of the runner. */
final class Json {
    static final Gson PRETTY = new GsonBuilder().setPrettyPrinting().disableHtmlEscaping().serializeNulls().create();

    private Json() {
    }

    /** Converts renderer output (strings, numbers, booleans, maps, collections) to JSON. */
    static JsonElement toJson(Object v) {
        if (v == null) {
            return JsonNull.INSTANCE;
        }
        if (v instanceof JsonElement e) {
            return e;
        }
        if (v instanceof String s) {
            return new JsonPrimitive(s);
        }
        if (v instanceof Number n) {
            return new JsonPrimitive(n);
        }
        if (v instanceof Boolean b) {
            return new JsonPrimitive(b);
        }
        if (v instanceof Map<?, ?> m) {
            JsonObject o = new JsonObject();
            m.forEach((k, x) -> o.add(String.valueOf(k), toJson(x)));
            return o;
        }
        if (v instanceof Collection<?> c) {
            JsonArray a = new JsonArray();
            c.forEach(x -> a.add(toJson(x)));
            return a;
        }
        return new JsonPrimitive(String.valueOf(v));
    }

    /** A notebook text field, which nbformat allows as a string or a list of strings. */
    static String text(JsonElement e) {
        if (e == null || e.isJsonNull()) {
            return "";
        }
        if (e.isJsonArray()) {
            StringBuilder sb = new StringBuilder();
            e.getAsJsonArray().forEach(x -> sb.append(x.getAsString()));
            return sb.toString();
        }
        return e.getAsString();
    }

    /** Writes {@code text} to {@code file} atomically ({@link AtomicFile}), creating its folder if needed. */
    static void writeAtomically(Path file, String text) throws IOException {
        Path abs = file.toAbsolutePath();
        Files.createDirectories(abs.getParent());
        AtomicFile.write(abs, text.getBytes(StandardCharsets.UTF_8));
    }
}
