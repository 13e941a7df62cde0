package dev.rungbook.io;

import dev.rungbook.tensor.DType;
import java.io.IOException;
import java.nio.file.Path;

/** One tensor as a reader found it: where it lives and how to read its values. */
abstract class Entry {
    final Path file;
    final String name;
    final DType dtype;
    final long[] shape;
    final long count;

    Entry(Path file, String name, DType dtype, long[] shape, long count) {
        this.file = file;
        this.name = name;
        this.dtype = dtype;
        this.shape = shape;
        this.count = count;
    }

    /**
     * Reads all values in row-major order; only called when {@code count} fits a Java array and every dimension fits
     * an int.
     */
    abstract float[] read(int[] intShape) throws IOException;
}
