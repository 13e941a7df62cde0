package dev.rungbook.runner;

import com.google.gson.Gson;
import com.google.gson.GsonBuilder;
import com.google.gson.JsonArray;
import com.google.gson.JsonElement;
import com.google.gson.JsonNull;
import com.google.gson.JsonObject;
import com.google.gson.JsonPrimitive;
import java.io.IOException;
import java.nio.charset.StandardCharsets;
import java.nio.file.AtomicMoveNotSupportedException;
import java.nio.file.Files;
import java.nio.file.Path;
import java.nio.file.StandardCopyOption;
import java.nio.file.attribute.PosixFilePermission;
import java.nio.file.attribute.PosixFilePermissions;
import java.util.Collection;
import java.util.Set;
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

    /** Gives the temporary file the target's permissions, or rw-r--r-- for a new file (where POSIX applies). */
    private static void permissions(Path tmp, Path target) throws IOException {
        if (!Files.getFileStore(tmp).supportsFileAttributeView("posix")) {
            return;
        }
        Set<PosixFilePermission> perms = Files.exists(target) ? Files.getPosixFilePermissions(target)
                : PosixFilePermissions.fromString("rw-r--r--");
        Files.setPosixFilePermissions(tmp, perms);
    }

    /** Writes {@code text} to {@code file} atomically: a temporary file in the same folder, then a rename. */
    static void writeAtomically(Path file, String text) throws IOException {
        Path abs = file.toAbsolutePath();
        Path dir = abs.getParent();
        Files.createDirectories(dir);
        Path tmp = Files.createTempFile(dir, "." + abs.getFileName() + ".", ".tmp");
        try {
            Files.writeString(tmp, text, StandardCharsets.UTF_8);
            permissions(tmp, abs);
            try {
                Files.move(tmp, abs, StandardCopyOption.ATOMIC_MOVE, StandardCopyOption.REPLACE_EXISTING);
            } catch (AtomicMoveNotSupportedException e) {
                Files.move(tmp, abs, StandardCopyOption.REPLACE_EXISTING);
            }
        } finally {
            Files.deleteIfExists(tmp);
        }
    }
}
