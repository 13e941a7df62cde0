package dev.rungbook.kernel;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.render.MimeBundle;
import dev.rungbook.render.OutputSink.Stream;
import java.nio.charset.StandardCharsets;
import java.util.ArrayList;
import java.util.List;
import org.junit.jupiter.api.Test;

class CellOutputTest {
    /** Records messages as "stdout:text", "display:id", ... */
    static final class Recorder implements CellOutput.Publisher {
        final List<String> messages = new ArrayList<>();

        @Override
        public void stream(Stream stream, String text) {
            messages.add(stream.name().toLowerCase() + ":" + text);
        }

        @Override
        public void display(MimeBundle bundle, String displayId) {
            messages.add("display:" + displayId + ":" + bundle.plainText());
        }

        @Override
        public void update(String displayId, MimeBundle bundle) {
            messages.add("update:" + displayId + ":" + bundle.plainText());
        }

        @Override
        public void clear(boolean wait) {
            messages.add("clear:" + wait);
        }
    }

    private static void write(CellOutput out, Stream s, String text) {
        byte[] b = text.getBytes(StandardCharsets.UTF_8);
        out.write(s, b, 0, b.length);
    }

    @Test
    void batchesWritesUntilFlushed() {
        Recorder r = new Recorder();
        CellOutput out = new CellOutput(r, 1000);
        write(out, Stream.STDOUT, "a");
        write(out, Stream.STDOUT, "b\n");
        assertEquals(List.of(), r.messages);
        out.flush();
        assertEquals(List.of("stdout:ab\n"), r.messages);
    }

    @Test
    void keepsTheOrderAcrossStreamsAndDisplays() {
        Recorder r = new Recorder();
        CellOutput out = new CellOutput(r, 1000);
        write(out, Stream.STDOUT, "one ");
        write(out, Stream.STDERR, "two ");
        out.display(MimeBundle.text("three"), "d1");
        write(out, Stream.STDOUT, "four");
        out.close();
        assertEquals(List.of("stdout:one ", "stderr:two ", "display:d1:three", "stdout:four"), r.messages);
    }

    @Test
    void decodesUtf8SplitAcrossWrites() {
        Recorder r = new Recorder();
        CellOutput out = new CellOutput(r, 1000);
        byte[] b = "é€".getBytes(StandardCharsets.UTF_8); // 2 + 3 bytes
        out.write(Stream.STDOUT, b, 0, 1);
        out.write(Stream.STDOUT, b, 1, 3);
        out.write(Stream.STDOUT, b, 4, 1);
        out.close();
        assertEquals(List.of("stdout:é€"), r.messages);
    }

    @Test
    void sendsLargeOutputInBatchesWithoutLosingText() {
        Recorder r = new Recorder();
        CellOutput out = new CellOutput(r, CellOutput.DEFAULT_LIMIT_CHARS);
        StringBuilder expected = new StringBuilder();
        for (int i = 0; i < 100_000; i++) {
            String line = "line " + i + "\n";
            expected.append(line);
            write(out, Stream.STDOUT, line);
        }
        out.close();
        StringBuilder got = new StringBuilder();
        for (String m : r.messages) {
            got.append(m.substring("stdout:".length()));
        }
        assertEquals(expected.toString(), got.toString());
        assertTrue(r.messages.size() < 100, "batched into " + r.messages.size() + " messages");
    }

    @Test
    void truncatesBeyondTheLimitWithANotice() {
        Recorder r = new Recorder();
        CellOutput out = new CellOutput(r, 10);
        write(out, Stream.STDOUT, "0123456");
        write(out, Stream.STDOUT, "789abcdef");
        out.close();
        assertEquals("stdout:0123456789", r.messages.get(0));
        assertEquals(6, out.truncatedChars());
        assertTrue(r.messages.get(1).startsWith("stderr:"), r.messages.toString());
        assertTrue(r.messages.get(1).contains("6 further characters"), r.messages.toString());
    }

    @Test
    void dropsAndCountsOutputAfterClose() {
        Recorder r = new Recorder();
        CellOutput out = new CellOutput(r, 1000);
        out.close();
        write(out, Stream.STDOUT, "late");
        out.display(MimeBundle.text("late"), "x");
        assertEquals(List.of(), r.messages);
        assertEquals(5, out.droppedAfterClose());
    }
}
