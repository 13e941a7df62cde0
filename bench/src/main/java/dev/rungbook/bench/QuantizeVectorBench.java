package dev.rungbook.bench;

import org.openjdk.jmh.annotations.Fork;

/**
 * {@link QuantizeBench} in a JVM started with {@code --add-modules jdk.incubator.vector}, so that the library's
 * optional Vector API reductions run (the results are the same bits; only the time differs).
 */
@Fork(value = 1, jvmArgsAppend = {"-Xmx6g", "--add-modules", "jdk.incubator.vector"})
public class QuantizeVectorBench extends QuantizeBench {
}
