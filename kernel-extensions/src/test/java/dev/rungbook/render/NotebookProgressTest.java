package dev.rungbook.render;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertTrue;

import java.util.ArrayList;
import java.util.List;
import java.util.concurrent.atomic.AtomicLong;
import org.junit.jupiter.api.Test;

class NotebookProgressTest {
    static final class Sink implements OutputSink {
        final List<String> events = new ArrayList<>();

        @Override
        public void write(Stream stream, byte[] bytes, int offset, int length) {
            events.add("write");
        }

        @Override
        public void display(MimeBundle bundle, String displayId) {
            events.add("display " + bundle.plainText());
        }

        @Override
        public void update(String displayId, MimeBundle bundle) {
            events.add("update " + bundle.plainText());
        }

        @Override
        public void clear(boolean wait) {
            events.add("clear");
        }
    }

    @Test
    void throttlesRedrawsButAlwaysDrawsFirstAndLast() {
        Sink sink = new Sink();
        AtomicLong now = new AtomicLong();
        NotebookProgress p = new NotebookProgress(sink, now::get);
        for (int i = 0; i <= 1000; i++) {
            now.set(i * 1_000_000L); // one report per millisecond: 1 s in all
            p.update("fit", i, 1000, 1.0 / (i + 1));
        }
        long displays = sink.events.stream().filter(e -> e.startsWith("display")).count();
        long updates = sink.events.stream().filter(e -> e.startsWith("update")).count();
        assertEquals(1, displays);
        // 1 s at 4 redraws per second plus the final report.
        assertTrue(updates >= 4 && updates <= 6, "updates " + updates);
        assertTrue(sink.events.get(sink.events.size() - 1).contains("100%"), sink.events.toString());
    }

    @Test
    void showsShareRateTimeLeftAndLoss() {
        MimeBundle b = NotebookProgress.view("adaptive rounding fc1", 50, 200, 0.01234, 10.0, false);
        String text = b.plainText();
        assertTrue(text.contains(" 25%"), text);
        assertTrue(text.contains("50/200"), text);
        assertTrue(text.contains("5/s"), text);
        assertTrue(text.contains("30s left"), text); // 150 steps at 5 per second
        assertTrue(text.contains("loss 0.01234"), text);
        String html = (String) b.data().get(MimeBundle.HTML);
        assertTrue(html.contains("<progress value=\"50\" max=\"200\""), html);
    }

    @Test
    void formatsDurations() {
        assertEquals("45s", NotebookProgress.duration(45));
        assertEquals("3m 05s", NotebookProgress.duration(185));
        assertEquals("2h 10m", NotebookProgress.duration(7800));
    }

    @Test
    void helpersWorkWithoutAKernel() {
        Notebook.bind(null);
        assertEquals(dev.rungbook.progress.Progress.silent().getClass(), Notebook.progress().getClass());
        Sink sink = new Sink();
        OutputSink before = Notebook.bind(sink);
        try {
            String id = Notebook.display("x");
            Notebook.updateDisplay(id, "y");
            Notebook.clearOutput();
            assertEquals(List.of("display x", "update y", "clear"), sink.events);
        } finally {
            Notebook.bind(before);
        }
    }
}
