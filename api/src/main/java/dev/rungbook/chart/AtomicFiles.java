package dev.rungbook.chart;

import java.io.IOException;
import java.io.UncheckedIOException;
import java.nio.file.AtomicMoveNotSupportedException;
import java.nio.file.Files;
import java.nio.file.Path;
import java.nio.file.StandardCopyOption;
import java.nio.file.attribute.PosixFileAttributeView;
import java.nio.file.attribute.PosixFilePermission;
import java.nio.file.attribute.PosixFilePermissions;
import java.util.Set;

/** Writes a file atomically: a temporary file in the target's folder, then a rename over the target. */
final class AtomicFiles {
    private AtomicFiles() {
    }

    /**
     * Temporary files are created readable by the owner only; give the new file the old file's permissions, or
     * {@code rw-r--r--} when there was none (on file systems with POSIX permissions).
     */
    private static void keepOrOpenPermissions(Path tmp, Path target) throws IOException {
        if (!Files.getFileStore(tmp).supportsFileAttributeView(PosixFileAttributeView.class)) {
            return;
        }
        Set<PosixFilePermission> perms = Files.exists(target) ? Files.getPosixFilePermissions(target)
                : PosixFilePermissions.fromString("rw-r--r--");
        Files.setPosixFilePermissions(tmp, perms);
    }

    /**
     * Replaces {@code target} with {@code bytes}. Readers see the old file or the new one, never a partial one; on
     * failure the old file is untouched and the temporary file removed.
     *
     * @throws UncheckedIOException naming the target if writing or renaming fails
     */
    static void write(Path target, byte[] bytes) {
        Path abs = target.toAbsolutePath();
        Path dir = abs.getParent();
        Path tmp = null;
        try {
            tmp = Files.createTempFile(dir, "." + abs.getFileName() + ".", ".tmp");
            Files.write(tmp, bytes);
            keepOrOpenPermissions(tmp, abs);
            try {
                Files.move(tmp, abs, StandardCopyOption.ATOMIC_MOVE, StandardCopyOption.REPLACE_EXISTING);
            } catch (AtomicMoveNotSupportedException e) {
                Files.move(tmp, abs, StandardCopyOption.REPLACE_EXISTING);
            }
            tmp = null;
        } catch (IOException e) {
            throw new UncheckedIOException("cannot write " + abs + ": " + e.getMessage(), e);
        } finally {
            if (tmp != null) {
                try {
                    Files.deleteIfExists(tmp);
                } catch (IOException ignored) {
                    // the original failure is the one to report
                }
            }
        }
    }
}
