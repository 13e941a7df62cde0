package dev.rungbook.internal;

import java.io.IOException;
import java.nio.channels.FileChannel;
import java.nio.file.AtomicMoveNotSupportedException;
import java.nio.file.Files;
import java.nio.file.Path;
import java.nio.file.StandardCopyOption;
import java.nio.file.StandardOpenOption;
import java.nio.file.attribute.PosixFileAttributeView;
import java.nio.file.attribute.PosixFilePermission;
import java.nio.file.attribute.PosixFilePermissions;
import java.nio.ByteBuffer;
import java.util.Set;
import java.util.concurrent.ThreadLocalRandom;

/**
 * Writes a file atomically: the content goes to a new temporary file in the target's folder, which is forced to disk
 * and then renamed over the target in one step ({@code ATOMIC_MOVE}). Readers see the old file or the new one, never a
 * half-written one; on any failure the temporary file is deleted and the target is untouched. A writer killed outright
 * (SIGKILL, power loss) cannot delete it: the trace is a file {@code .<target name>.<random hex>.tmp} beside the
 * target, never read as the target, safe to delete (WriterKillTest). A replaced file keeps its permissions; a new one
 * gets {@code rw-r--r--} (where the file system has POSIX permissions). Every Rungbook writer (checkpoints, charts,
 * reports, notebooks) goes through here. Internal.
 */
public final class AtomicFile {
    private AtomicFile() {
    }

    /** Writes the content. */
    public interface Body {
        /** Writes everything to {@code out}. */
        void write(FileChannel out) throws IOException;
    }

    /** Replaces {@code target} with {@code bytes}, atomically. */
    public static void write(Path target, byte[] bytes) throws IOException {
        write(target, ch -> {
            ByteBuffer b = ByteBuffer.wrap(bytes);
            while (b.hasRemaining()) {
                ch.write(b);
            }
        });
    }

    /** Replaces {@code target} with what {@code body} writes, atomically. */
    public static void write(Path target, Body body) throws IOException {
        Path abs = target.toAbsolutePath();
        Path dir = abs.getParent();
        if (Files.isDirectory(abs)) {
            throw new IOException("is a directory");
        }
        if (dir == null || !Files.isDirectory(dir)) {
            throw new IOException("folder " + dir + " does not exist");
        }
        Path tmp = dir.resolve("." + abs.getFileName() + "."
                + Long.toHexString(ThreadLocalRandom.current().nextLong() & Long.MAX_VALUE) + ".tmp");
        boolean done = false;
        try {
            try (FileChannel ch = FileChannel.open(tmp, StandardOpenOption.CREATE_NEW, StandardOpenOption.WRITE)) {
                body.write(ch);
                ch.force(true);
            }
            keepOrOpenPermissions(tmp, abs);
            try {
                Files.move(tmp, abs, StandardCopyOption.ATOMIC_MOVE, StandardCopyOption.REPLACE_EXISTING);
            } catch (AtomicMoveNotSupportedException e) {
                throw new IOException("this file system cannot rename atomically; refusing a non-atomic write", e);
            }
            done = true;
            syncFolder(dir);
        } finally {
            if (!done) {
                Files.deleteIfExists(tmp);
            }
        }
    }

    private static void keepOrOpenPermissions(Path tmp, Path target) throws IOException {
        if (!Files.getFileStore(tmp).supportsFileAttributeView(PosixFileAttributeView.class)) {
            return;
        }
        Set<PosixFilePermission> perms = Files.exists(target) ? Files.getPosixFilePermissions(target)
                : PosixFilePermissions.fromString("rw-r--r--");
        Files.setPosixFilePermissions(tmp, perms);
    }

    /** Makes the rename durable where the platform allows opening a folder (Linux, macOS); elsewhere a no-op. */
    private static void syncFolder(Path dir) {
        try (FileChannel d = FileChannel.open(dir, StandardOpenOption.READ)) {
            d.force(true);
        } catch (IOException | RuntimeException e) {
            // Not supported here (e.g. Windows); the data itself was forced before the rename.
        }
    }
}
