package dev.rungbook.io;

import java.nio.file.Path;
import java.util.Objects;
import java.util.Optional;

/**
 * A checkpoint file cannot be read as what it claims to be: it is truncated, its header is malformed or hostile, a
 * tensor's description contradicts its data, or a tensor cannot be loaded (for example it holds more elements than
 * one {@link dev.rungbook.tensor.Tensor} can).
 *
 * <p>The message is {@code FILE: tensor 'NAME': PROBLEM}, or {@code FILE: PROBLEM} when the problem concerns no
 * single tensor. The parts are also available as {@link #file()}, {@link #tensor()} and {@link #problem()}.
 */
public final class CheckpointFormatException extends RuntimeException {
    private static final long serialVersionUID = 1L;

    private final transient Path file;
    private final String tensor;
    private final String problem;

    /**
     * A format error.
     *
     * @param file the file at fault (a shard, an index or the file given to {@code Checkpoint.open})
     * @param tensor the tensor concerned, or {@code null}
     * @param problem what is wrong, naming the offending values
     */
    public CheckpointFormatException(Path file, String tensor, String problem) {
        this(file, tensor, problem, null);
    }

    /** A format error caused by {@code cause} (for example a {@link java.util.zip.ZipException}). */
    public CheckpointFormatException(Path file, String tensor, String problem, Throwable cause) {
        super(message(file, tensor, problem), cause);
        this.file = Objects.requireNonNull(file, "file");
        this.tensor = tensor;
        this.problem = Objects.requireNonNull(problem, "problem");
    }

    private static String message(Path file, String tensor, String problem) {
        return file + ": " + (tensor == null ? "" : "tensor '" + tensor + "': ") + problem;
    }

    /** The file at fault. */
    public Path file() {
        return file;
    }

    /** The tensor concerned, if the problem concerns one. */
    public Optional<String> tensor() {
        return Optional.ofNullable(tensor);
    }

    /** What is wrong, without the file and tensor prefix. */
    public String problem() {
        return problem;
    }
}
