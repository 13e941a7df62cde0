package dev.rungbook.hostile;

import static org.junit.jupiter.api.Assertions.assertTrue;

import java.io.IOException;
import java.nio.charset.StandardCharsets;
import java.nio.file.Files;
import java.nio.file.Path;
import org.junit.jupiter.api.Test;

/** Keeps docs/reliability.md current: it must list every hostile corpus file and name every fuzzed reader. */
class ReliabilityPageTest {
    private static String page() throws IOException {
        return Files.readString(Path.of("../docs/reliability.md"), StandardCharsets.UTF_8);
    }

    @Test
    void listsEveryHostileFile() throws IOException {
        String page = page();
        for (String[] row : HostileCorpusTest.manifest()) {
            assertTrue(page.contains("| `" + row[0] + "` |"), "docs/reliability.md does not list " + row[0]);
        }
    }

    @Test
    void namesEveryFuzzedReader() throws IOException {
        String page = page();
        for (String reader : new String[] {"safetensors header + data", "sharded index JSON", ".npy header",
                ".npz container"}) {
            assertTrue(page.contains("| " + reader + " |"), "docs/reliability.md has no row for " + reader);
        }
    }
}
