package dev.rungbook.kernel;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertNull;

import java.util.EnumSet;
import java.util.List;
import java.util.Set;
import org.dflib.jjava.jupyter.kernel.history.HistoryEntry;
import org.dflib.jjava.jupyter.kernel.history.HistoryManager.ResultFlag;
import org.junit.jupiter.api.Test;

class CellHistoryTest {
    private static CellHistory history() {
        CellHistory h = new CellHistory();
        h.add(1, "6 * 7", "42");
        h.add(2, "int x = 1;", null);
        h.add(3, "6 * 7", "42");
        h.add(4, "6 * 8", "48");
        return h;
    }

    private static List<String> inputs(List<HistoryEntry> entries) {
        return entries.stream().map(HistoryEntry::getInput).toList();
    }

    @Test
    void tailRangeAndSearch() {
        CellHistory h = history();
        Set<ResultFlag> none = EnumSet.noneOf(ResultFlag.class);
        assertEquals(List.of("6 * 7", "6 * 8"), inputs(h.lookupTail(2, none)));
        assertEquals(List.of("int x = 1;", "6 * 7"), inputs(h.lookupRange(CellHistory.SESSION, 2, 4, none)));
        // Source: Jupyter messaging spec, history_request: "pattern" is a glob (* and ?), "unique" drops repeats.
        assertEquals(List.of("6 * 7", "6 * 7", "6 * 8"), inputs(h.search("6 * ?", 10, none)));
        assertEquals(List.of("6 * 7", "6 * 8"), inputs(h.search("6 * ?", 10, EnumSet.of(ResultFlag.UNIQUE))));
        assertEquals(List.of("6 * 7", "6 * 8"), inputs(h.search("6*", 2, none)));
    }

    @Test
    void outputOnlyWhenAsked() {
        CellHistory h = history();
        assertNull(h.lookupTail(1, EnumSet.noneOf(ResultFlag.class)).get(0).getOutput());
        assertEquals("48", h.lookupTail(1, EnumSet.of(ResultFlag.INCLUDE_OUTPUT)).get(0).getOutput());
    }
}
