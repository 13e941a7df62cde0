package dev.rungbook.nn;

import dev.rungbook.tensor.Tensor;

/** One step of a {@link Network}: maps a batch shaped {@code [N, ...]} to a batch. Layers are immutable. */
public interface Layer {
    /** A short name for tables and messages, e.g. {@code fc1} or {@code relu1}. */
    String name();

    /** The float forward pass on a batch whose first axis is the sample index. */
    Tensor forward(Tensor batch);
}
