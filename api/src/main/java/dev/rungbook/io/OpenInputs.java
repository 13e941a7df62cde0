package dev.rungbook.io;

import java.io.IOException;
import java.nio.file.Files;
import java.nio.file.Path;
import java.nio.file.attribute.BasicFileAttributes;
import java.util.concurrent.ConcurrentHashMap;

/**
 * The files that open {@link Checkpoint}s read from, so that a writer can refuse to replace one. A file is identified
 * by its file key (device and inode where the platform has them, so hard links and symbolic links are recognised),
 * else by its real path. Each open counts once; the count drops on close.
 */
final class OpenInputs {
    private static final ConcurrentHashMap<Object, Integer> OPEN = new ConcurrentHashMap<>();

    private OpenInputs() {
    }

    static Object key(Path file) throws IOException {
        Object k = Files.readAttributes(file, BasicFileAttributes.class).fileKey();
        return k != null ? k : file.toRealPath();
    }

    static void add(Object key) {
        OPEN.merge(key, 1, Integer::sum);
    }

    static void remove(Object key) {
        OPEN.computeIfPresent(key, (k, n) -> n == 1 ? null : n - 1);
    }

    /** True if {@code file} exists and an open checkpoint reads it. */
    static boolean isOpen(Path file) {
        if (!Files.exists(file)) {
            return false;
        }
        try {
            return OPEN.containsKey(key(file));
        } catch (IOException e) {
            return false;
        }
    }
}
