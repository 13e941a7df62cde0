/**
 * Checkpoint files: {@link dev.rungbook.io.Checkpoint#open} reads safetensors (single files and sharded indexes), NumPy
 * {@code .npy} and {@code .npz}; {@link dev.rungbook.io.Checkpoint#write} writes safetensors and {@code .npz}
 * atomically. Malformed files give a {@link dev.rungbook.io.CheckpointFormatException} naming the file, the tensor and
 * the problem.
 *
 * <p>Readers are registered explicitly, by magic bytes and extension, in one package-private registry
 * ({@code Formats}); adding a format means writing a reader that lists its tensors and adding one entry there.
 */
package dev.rungbook.io;
