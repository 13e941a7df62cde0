package dev.rungbook.io;

import dev.rungbook.internal.AtomicFile;
import dev.rungbook.tensor.DType;
import dev.rungbook.tensor.Tensor;
import java.nio.ByteBuffer;
import java.nio.charset.StandardCharsets;
import java.nio.file.Path;
import java.util.LinkedHashMap;
import java.util.Map;

/**
 * The writer that {@link WriterKillTest} starts in a separate JVM and kills. Modes:
 * <ul>
 *   <li>{@code stall <target> <MiB>}: {@link Checkpoint#write} of tensor {@code a} ({@code MiB} MiB of float32) and
 *       a lazy tensor {@code z} whose loader prints {@code MID-WRITE} and blocks: the writer is then provably half way
 *       (tensor {@code a} is in the temporary file, {@code z} is not);</li>
 *   <li>{@code run <target> <MiB>}: the same checkpoint without the stall, after printing {@code STARTED};</li>
 *   <li>{@code report <target>}: {@link AtomicFile#write} of a report-like HTML file that prints {@code MID-WRITE}
 *       after its first MiB and blocks.</li>
 * </ul>
 */
public final class WriterToKill {
    private WriterToKill() {
    }

    /** The value at flat index {@code i} of tensor {@code a} (exact in float32). */
    static float valueA(int i) {
        return (i % 65536) * 0.25f;
    }

    static Map<String, Tensor> tensors(int mib, boolean stall) {
        int n = mib * (1 << 20) / 4;
        Map<String, Tensor> m = new LinkedHashMap<>();
        m.put("a", Tensor.generate(WriterToKill::valueA, n));
        if (stall) {
            m.put("z", Tensor.lazy("z", DType.F32, new int[] {1024}, () -> {
                signalAndBlock();
                return new float[1024];
            }));
        } else {
            m.put("z", Tensor.of(new float[1024], 1024));
        }
        return m;
    }

    private static void signalAndBlock() {
        System.out.println("MID-WRITE");
        System.out.flush();
        while (true) {
            try {
                Thread.sleep(60_000);
            } catch (InterruptedException e) {
                // keep blocking: only the kill ends this process
            }
        }
    }

    public static void main(String[] args) throws Exception {
        Path target = Path.of(args[1]);
        switch (args[0]) {
            case "stall":
                Checkpoint.write(target, tensors(Integer.parseInt(args[2]), true));
                break;
            case "run":
                System.out.println("STARTED");
                System.out.flush();
                Checkpoint.write(target, tensors(Integer.parseInt(args[2]), false));
                System.out.println("DONE");
                break;
            case "report":
                AtomicFile.write(target, ch -> {
                    byte[] row = "<tr><td>layer</td><td>0.125</td></tr>\n".getBytes(StandardCharsets.UTF_8);
                    long written = 0;
                    while (written < (1 << 20)) {
                        ch.write(ByteBuffer.wrap(row));
                        written += row.length;
                    }
                    signalAndBlock();
                });
                break;
            default:
                throw new IllegalArgumentException("unknown mode " + args[0]);
        }
    }
}
