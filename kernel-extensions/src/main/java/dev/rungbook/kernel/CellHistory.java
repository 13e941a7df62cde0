package dev.rungbook.kernel;

import java.util.ArrayList;
import java.util.LinkedHashMap;
import java.util.List;
import java.util.Map;
import java.util.Set;
import java.util.regex.Pattern;
import org.dflib.jjava.jupyter.kernel.history.HistoryEntry;
import org.dflib.jjava.jupyter.kernel.history.HistoryManager;

/** The executed cells of this kernel session (in memory), for history requests: tail, range and glob search. */
final class CellHistory implements HistoryManager {
    /** The session number reported to clients (this kernel keeps one session per process). */
    static final int SESSION = 1;

    private record Entry(int cell, String input, String output) {
    }

    private final List<Entry> entries = new ArrayList<>();

    synchronized void add(int cell, String input, String output) {
        entries.add(new Entry(cell, input, output));
    }

    @Override
    public synchronized List<HistoryEntry> lookupRange(int session, int start, int stop, Set<ResultFlag> flags) {
        List<HistoryEntry> out = new ArrayList<>();
        if (session != SESSION && session != 0) {
            return out;
        }
        for (Entry e : entries) {
            if (e.cell() >= start && (stop <= 0 || e.cell() < stop)) {
                out.add(entry(e, flags));
            }
        }
        return out;
    }

    @Override
    public synchronized List<HistoryEntry> lookupTail(int length, Set<ResultFlag> flags) {
        List<HistoryEntry> out = new ArrayList<>();
        int from = Math.max(0, entries.size() - Math.max(0, length));
        for (Entry e : entries.subList(from, entries.size())) {
            out.add(entry(e, flags));
        }
        return out;
    }

    @Override
    public synchronized List<HistoryEntry> search(String glob, int length, Set<ResultFlag> flags) {
        Pattern p = globPattern(glob);
        boolean unique = flags.contains(ResultFlag.UNIQUE);
        Map<String, Entry> found = new LinkedHashMap<>();
        List<Entry> all = new ArrayList<>();
        for (int i = entries.size() - 1; i >= 0; i--) {
            Entry e = entries.get(i);
            if (p.matcher(e.input()).matches()) {
                if (unique) {
                    found.putIfAbsent(e.input(), e);
                } else {
                    all.add(e);
                }
            }
        }
        List<Entry> hits = unique ? new ArrayList<>(found.values()) : all;
        if (length > 0 && hits.size() > length) {
            hits = hits.subList(0, length);
        }
        List<HistoryEntry> out = new ArrayList<>();
        for (int i = hits.size() - 1; i >= 0; i--) {
            out.add(entry(hits.get(i), flags));
        }
        return out;
    }

    private static HistoryEntry entry(Entry e, Set<ResultFlag> flags) {
        return flags.contains(ResultFlag.INCLUDE_OUTPUT)
                ? new HistoryEntry(SESSION, e.cell(), e.input(), e.output() == null ? "" : e.output())
                : new HistoryEntry(SESSION, e.cell(), e.input(), null);
    }

    /** A Jupyter history glob ({@code *} any text, {@code ?} one character) as a regular expression. */
    static Pattern globPattern(String glob) {
        StringBuilder re = new StringBuilder();
        for (char c : glob.toCharArray()) {
            switch (c) {
                case '*' -> re.append(".*");
                case '?' -> re.append('.');
                default -> re.append(Pattern.quote(String.valueOf(c)));
            }
        }
        return Pattern.compile(re.toString(), Pattern.DOTALL);
    }
}
