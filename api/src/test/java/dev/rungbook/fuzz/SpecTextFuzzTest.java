package dev.rungbook.fuzz;

import static org.junit.jupiter.api.Assertions.assertTrue;

import com.code_intelligence.jazzer.junit.FuzzTest;
import dev.rungbook.quant.Quantizer;
import dev.rungbook.quant.SpecSyntaxException;
import java.io.IOException;
import java.nio.charset.StandardCharsets;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.concurrent.atomic.AtomicInteger;
import java.util.stream.Stream;
import org.junit.jupiter.api.AfterAll;

/**
 * Coverage-guided fuzzing of the spec text parser ({@link Quantizer#parse}). The fuzzer's bytes, read as UTF-8, are
 * parsed; the only accepted refusal is a {@link SpecSyntaxException} with a message and a position inside the text.
 * A spec that parses must print to a text that parses back to an equal spec. Anything else (another exception, a
 * round trip that changes the spec) is a finding.
 *
 * <p>Without {@code JAZZER_FUZZ} Jazzer runs the target once per file of the committed corpus in
 * {@code src/test/resources/dev/rungbook/fuzz/SpecTextFuzzTestInputs/parse/}; {@link #everySeedRan} checks that they
 * ran. {@code ./rungbook fuzz --minutes N} fuzzes for longer.
 */
class SpecTextFuzzTest {
    private static final AtomicInteger RUNS = new AtomicInteger();

    @AfterAll
    static void everySeedRan() throws IOException {
        if (System.getenv("JAZZER_FUZZ") == null) {
            Path p = Path.of("src/test/resources/dev/rungbook/fuzz/SpecTextFuzzTestInputs/parse");
            int seeds;
            try (Stream<Path> s = Files.list(p)) {
                seeds = (int) s.filter(Files::isRegularFile).count();
            }
            assertTrue(seeds > 0, "no committed seeds for parse");
            assertTrue(RUNS.get() >= seeds, "parse: ran " + RUNS.get() + " inputs, corpus has " + seeds);
        }
    }

    @FuzzTest(maxDuration = "30m")
    void parse(byte[] input) {
        RUNS.incrementAndGet();
        String text = new String(input, StandardCharsets.UTF_8);
        Quantizer q;
        try {
            q = Quantizer.parse(text);
        } catch (SpecSyntaxException e) {
            if (e.getMessage() == null || e.getMessage().isBlank()) {
                throw new AssertionError("refusal without a message", e);
            }
            if (e.position() < 0 || e.position() > text.length()) {
                throw new AssertionError("position " + e.position() + " outside the text of length " + text.length(),
                        e);
            }
            return;
        }
        String canonical = q.toText();
        Quantizer back = Quantizer.parse(canonical);
        if (!back.equals(q)) {
            throw new AssertionError("'" + text + "' parsed to " + q + ", whose text '" + canonical + "' parses to "
                    + back);
        }
    }
}
