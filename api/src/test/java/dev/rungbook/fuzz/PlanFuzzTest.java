package dev.rungbook.fuzz;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertTrue;

import com.code_intelligence.jazzer.junit.FuzzTest;
import dev.rungbook.plan.Plan;
import dev.rungbook.plan.PlanFormatException;
import java.io.IOException;
import java.nio.charset.StandardCharsets;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.concurrent.atomic.AtomicInteger;
import java.util.stream.Stream;
import org.junit.jupiter.api.AfterAll;

/**
 * Coverage-guided fuzzing of the plan file reader ({@link Plan#parse}). The only accepted failure is a
 * {@link PlanFormatException} with a message naming the file; a plan that parses must write back to JSON that parses
 * to an equal plan. Anything else (a NullPointerException, an index error, a hang) is a finding.
 *
 * <p>Without {@code JAZZER_FUZZ} Jazzer runs the target once per committed seed in
 * {@code src/test/resources/dev/rungbook/fuzz/PlanFuzzTestInputs/planJson/}; {@link #everySeedRan} checks that they
 * did. Fuzz longer with {@code JAZZER_FUZZ=1 mvn -pl api test -Dtest='dev.rungbook.fuzz.PlanFuzzTest'}.
 */
class PlanFuzzTest {
    private static final Path SOURCE = Path.of("fuzzed-plan.json");
    private static final AtomicInteger RUNS = new AtomicInteger();

    @AfterAll
    static void everySeedRan() throws IOException {
        if (System.getenv("JAZZER_FUZZ") == null) {
            Path p = Path.of("src/test/resources/dev/rungbook/fuzz/PlanFuzzTestInputs/planJson");
            long seeds;
            try (Stream<Path> s = Files.list(p)) {
                seeds = s.filter(Files::isRegularFile).count();
            }
            assertTrue(seeds > 0, "no committed seeds for planJson");
            // Jazzer also runs an empty input in regression mode, hence >=.
            assertTrue(RUNS.get() >= seeds, "planJson: ran " + RUNS.get() + " inputs, corpus has " + seeds);
        }
    }

    @FuzzTest(maxDuration = "30m")
    void planJson(byte[] input) {
        RUNS.incrementAndGet();
        Plan p;
        try {
            p = Plan.parse(input, SOURCE);
        } catch (PlanFormatException e) {
            if (e.getMessage() == null || !e.getMessage().startsWith(SOURCE.toString())) {
                throw new AssertionError("refusal without the file name: " + e.getMessage(), e);
            }
            return;
        }
        Plan again = Plan.parse(p.toJson().getBytes(StandardCharsets.UTF_8), SOURCE);
        assertEquals(p, again);
    }
}
