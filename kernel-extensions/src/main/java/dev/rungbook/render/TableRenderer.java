package dev.rungbook.render;

import java.util.ArrayList;
import java.util.List;
import java.util.Locale;
import tech.tablesaw.api.ColumnType;
import tech.tablesaw.api.NumericColumn;
import tech.tablesaw.api.Table;
import tech.tablesaw.columns.Column;

/**
 * Tablesaw {@link Table} to a compact HTML table (numbers right-aligned and formatted to be read, not parsed) and an
 * aligned {@code text/plain} table. Tables longer than {@link #MAX_ROWS} rows show their first {@link #HEAD} and last
 * {@link #TAIL} rows and the row count, so that rendering cost does not grow with the table.
 */
public final class TableRenderer {
    /** Tables with at most this many rows are shown whole. */
    public static final int MAX_ROWS = 30;
    /** Rows shown from the start of a longer table. */
    public static final int HEAD = 10;
    /** Rows shown from the end of a longer table. */
    public static final int TAIL = 5;

    private TableRenderer() {
    }

    /** Renders {@code table} as {@code text/html} and {@code text/plain}. */
    public static MimeBundle render(Table table) {
        List<Integer> rows = shownRows(table.rowCount());
        return MimeBundle.html(html(table, rows), plain(table, rows));
    }

    static List<Integer> shownRows(int rowCount) {
        List<Integer> rows = new ArrayList<>();
        if (rowCount <= MAX_ROWS) {
            for (int i = 0; i < rowCount; i++) {
                rows.add(i);
            }
        } else {
            for (int i = 0; i < HEAD; i++) {
                rows.add(i);
            }
            rows.add(-1); // the gap
            for (int i = rowCount - TAIL; i < rowCount; i++) {
                rows.add(i);
            }
        }
        return rows;
    }

    static String html(Table table, List<Integer> rows) {
        StringBuilder h = new StringBuilder(256 + 64 * rows.size() * Math.max(1, table.columnCount()));
        h.append("<div class=\"rungbook-table\"><style>")
                .append(".rungbook-table table{border-collapse:collapse;font-size:12px;font-variant-numeric:tabular-nums}")
                .append(".rungbook-table th,.rungbook-table td{padding:2px 8px;border-bottom:1px solid #ddd}")
                .append(".rungbook-table th{text-align:left;font-weight:600}")
                .append(".rungbook-table .n{text-align:right}.rungbook-table .gap{text-align:center;color:#888}")
                .append(".rungbook-table caption{caption-side:bottom;text-align:left;color:#666;font-size:11px}")
                .append("</style><table>");
        String name = table.name();
        h.append("<caption>");
        if (name != null && !name.isBlank()) {
            h.append(escape(name)).append(" &middot; ");
        }
        h.append(count(table.rowCount(), "row")).append(" &times; ").append(count(table.columnCount(), "column"))
                .append("</caption><thead><tr>");
        for (Column<?> c : table.columns()) {
            h.append(numeric(c) ? "<th class=\"n\">" : "<th>").append(escape(c.name())).append("</th>");
        }
        h.append("</tr></thead><tbody>");
        for (int r : rows) {
            if (r < 0) {
                int hidden = table.rowCount() - HEAD - TAIL;
                h.append("<tr><td class=\"gap\" colspan=\"").append(Math.max(1, table.columnCount())).append("\">&vellip; ")
                        .append(count(hidden, "more row")).append("</td></tr>");
                continue;
            }
            h.append("<tr>");
            for (Column<?> c : table.columns()) {
                h.append(numeric(c) ? "<td class=\"n\">" : "<td>").append(escape(cell(c, r))).append("</td>");
            }
            h.append("</tr>");
        }
        h.append("</tbody></table></div>");
        return h.toString();
    }

    static String plain(Table table, List<Integer> rows) {
        int cols = table.columnCount();
        List<String[]> lines = new ArrayList<>();
        String[] header = new String[cols];
        for (int j = 0; j < cols; j++) {
            header[j] = table.column(j).name();
        }
        lines.add(header);
        for (int r : rows) {
            String[] line = new String[cols];
            for (int j = 0; j < cols; j++) {
                line[j] = r < 0 ? "..." : cell(table.column(j), r);
            }
            lines.add(line);
        }
        int[] width = new int[cols];
        for (String[] l : lines) {
            for (int j = 0; j < cols; j++) {
                width[j] = Math.max(width[j], l[j].length());
            }
        }
        StringBuilder out = new StringBuilder();
        String name = table.name();
        if (name != null && !name.isBlank()) {
            out.append(name).append('\n');
        }
        for (String[] l : lines) {
            for (int j = 0; j < cols; j++) {
                if (j > 0) {
                    out.append("  ");
                }
                boolean right = numeric(table.column(j)) && l != header;
                String v = l[j];
                String pad = " ".repeat(width[j] - v.length());
                out.append(right ? pad + v : v + (j == cols - 1 ? "" : pad));
            }
            out.append('\n');
        }
        out.append(count(table.rowCount(), "row")).append(" x ").append(count(table.columnCount(), "column"));
        return out.toString();
    }

    private static boolean numeric(Column<?> c) {
        return c instanceof NumericColumn<?>;
    }

    static String cell(Column<?> c, int row) {
        if (c.isMissing(row)) {
            return "";
        }
        ColumnType t = c.type();
        if (t == ColumnType.DOUBLE || t == ColumnType.FLOAT) {
            return number(((Number) c.get(row)).doubleValue());
        }
        return c.getString(row);
    }

    /**
     * A readable number: 4 significant digits, plain notation between 1e-3 and 1e6, scientific outside, trailing
     * zeros dropped (e.g. {@code 0.1235}, {@code 12.5}, {@code 1.235e+07}, {@code 3.0e-05}).
     */
    public static String number(double v) {
        if (Double.isNaN(v)) {
            return "NaN";
        }
        if (Double.isInfinite(v)) {
            return v > 0 ? "∞" : "-∞";
        }
        if (v == 0) {
            return "0";
        }
        double a = Math.abs(v);
        if (a >= 1e6 || a < 1e-3) {
            String s = String.format(Locale.ROOT, "%.3e", v);
            int e = s.indexOf('e');
            String mant = trimZeros(s.substring(0, e));
            if (!mant.contains(".")) {
                mant += ".0";
            }
            return mant + s.substring(e);
        }
        int digitsBefore = (int) Math.floor(Math.log10(a)) + 1;
        int decimals = Math.max(0, 4 - digitsBefore);
        return trimZeros(String.format(Locale.ROOT, "%." + decimals + "f", v));
    }

    private static String trimZeros(String s) {
        if (!s.contains(".")) {
            return s;
        }
        int end = s.length();
        while (s.charAt(end - 1) == '0') {
            end--;
        }
        if (s.charAt(end - 1) == '.') {
            end--;
        }
        return s.substring(0, end);
    }

    private static String count(int n, String noun) {
        return String.format(Locale.ROOT, "%,d %s%s", n, noun, n == 1 ? "" : "s");
    }

    /** HTML-escapes text. */
    public static String escape(String s) {
        StringBuilder b = new StringBuilder(s.length());
        for (int i = 0; i < s.length(); i++) {
            char ch = s.charAt(i);
            switch (ch) {
                case '<' -> b.append("&lt;");
                case '>' -> b.append("&gt;");
                case '&' -> b.append("&amp;");
                case '"' -> b.append("&quot;");
                default -> b.append(ch);
            }
        }
        return b.toString();
    }
}
