package dev.rungbook.io;

import java.io.Closeable;
import java.nio.file.Path;
import java.util.ArrayList;
import java.util.LinkedHashMap;
import java.util.List;
import java.util.Map;

/** What a reader found in a file: tensors in file order, metadata, the open resources and files involved. */
final class Contents {
    final String format;
    final Map<String, Entry> entries = new LinkedHashMap<>();
    final Map<String, String> metadata = new LinkedHashMap<>();
    final List<Closeable> resources = new ArrayList<>();
    final List<Path> files = new ArrayList<>();

    Contents(String format) {
        this.format = format;
    }

    /** Adds an entry, refusing a name seen before. */
    void add(Entry e) {
        if (entries.putIfAbsent(e.name, e) != null) {
            throw new CheckpointFormatException(e.file, e.name, "duplicate tensor name");
        }
    }

    /** Closes every resource, keeping the first failure. */
    void closeAll() {
        RuntimeException first = null;
        for (Closeable c : resources) {
            try {
                c.close();
            } catch (java.io.IOException | RuntimeException e) {
                if (first == null) {
                    first = new java.io.UncheckedIOException("could not close " + c,
                            e instanceof java.io.IOException ? (java.io.IOException) e : new java.io.IOException(e));
                }
            }
        }
        resources.clear();
        if (first != null) {
            throw first;
        }
    }
}
