package dev.rungbook.cli;

import com.google.gson.GsonBuilder;
import com.google.gson.JsonArray;
import com.google.gson.JsonNull;
import com.google.gson.JsonObject;
import com.google.gson.JsonPrimitive;
import dev.rungbook.chart.Charts;
import dev.rungbook.internal.AtomicFile;
import dev.rungbook.render.TableRenderer;
import java.io.IOException;
import java.nio.charset.StandardCharsets;
import java.nio.file.Path;
import java.util.Base64;
import java.util.List;
import java.util.Locale;
import org.knowm.xchart.internal.chartpart.IChart;
import tech.tablesaw.api.Table;
import tech.tablesaw.columns.Column;

/**
 * The reports of {@code rungbook quantize} and {@code rungbook study}, chosen by extension: {@code .html} (a
 * self-contained page: summary table, PNG charts embedded as data URIs, the full table), {@code .json}
 * ({@code {"title", "notes", "summary": [row objects], "rows": [row objects]}}, non-finite numbers as null) or
 * {@code .csv} (the full table; RFC 4180 quoting, numbers in Java's shortest round-trip form). Written atomically.
 */
final class Report {
    private static final String STYLE = "body{font-family:system-ui,sans-serif;margin:2em auto;max-width:1200px;"
            + "padding:0 1em}table{border-collapse:collapse;margin:1em 0;font-size:13px}"
            + "th,td{border:1px solid #ccc;padding:3px 8px;white-space:nowrap}"
            + "td.n{text-align:right;font-variant-numeric:tabular-nums}"
            + "th{background:#f3f3f3}img{max-width:100%;margin:1em 0}";

    private Report() {
    }

    /** The report kind of {@code file} ({@code html}, {@code json}, {@code csv}), or null if the extension is none. */
    static String kind(Path file) {
        String n = file.getFileName().toString().toLowerCase(Locale.ROOT);
        for (String k : new String[] {"html", "json", "csv"}) {
            if (n.endsWith("." + k)) {
                return k;
            }
        }
        return null;
    }

    /** Writes the report (the kind must be known: see {@link #kind}). */
    static void write(Path file, String title, List<String> notes, Table summary, Table rows, List<IChart> charts)
            throws IOException {
        String text;
        switch (kind(file)) {
            case "html":
                text = html(title, notes, summary, rows, charts);
                break;
            case "json":
                text = json(title, notes, summary, rows);
                break;
            default:
                text = csv(rows);
                break;
        }
        AtomicFile.write(file.toAbsolutePath(), text.getBytes(StandardCharsets.UTF_8));
    }

    private static boolean numeric(Column<?> c) {
        return c.type().name().matches("DOUBLE|FLOAT|INTEGER|LONG|SHORT");
    }

    static String csv(Table t) {
        StringBuilder b = new StringBuilder();
        for (int c = 0; c < t.columnCount(); c++) {
            b.append(c == 0 ? "" : ",").append(quote(t.column(c).name()));
        }
        b.append("\r\n");
        for (int r = 0; r < t.rowCount(); r++) {
            for (int c = 0; c < t.columnCount(); c++) {
                Column<?> col = t.column(c);
                Object v = col.get(r);
                b.append(c == 0 ? "" : ",");
                if (v == null) {
                    continue;
                }
                b.append(numeric(col) ? String.valueOf(v) : quote(String.valueOf(v)));
            }
            b.append("\r\n");
        }
        return b.toString();
    }

    private static String quote(String s) {
        if (s.indexOf(',') < 0 && s.indexOf('"') < 0 && s.indexOf('\n') < 0 && s.indexOf('\r') < 0) {
            return s;
        }
        return '"' + s.replace("\"", "\"\"") + '"';
    }

    static JsonArray jsonRows(Table t) {
        JsonArray rows = new JsonArray();
        for (int r = 0; r < t.rowCount(); r++) {
            JsonObject o = new JsonObject();
            for (int c = 0; c < t.columnCount(); c++) {
                Column<?> col = t.column(c);
                Object v = col.get(r);
                if (v == null) {
                    o.add(col.name(), JsonNull.INSTANCE);
                } else if (v instanceof Number) {
                    double d = ((Number) v).doubleValue();
                    o.add(col.name(), Double.isFinite(d) ? new JsonPrimitive((Number) v) : JsonNull.INSTANCE);
                } else {
                    o.addProperty(col.name(), String.valueOf(v));
                }
            }
            rows.add(o);
        }
        return rows;
    }

    private static String json(String title, List<String> notes, Table summary, Table rows) {
        JsonObject root = new JsonObject();
        root.addProperty("title", title);
        JsonArray n = new JsonArray();
        notes.stream().filter(x -> !x.isEmpty()).forEach(n::add);
        root.add("notes", n);
        root.add("summary", summary == null ? new JsonArray() : jsonRows(summary));
        root.add("rows", jsonRows(rows));
        return new GsonBuilder().setPrettyPrinting().disableHtmlEscaping().serializeNulls().create().toJson(root) + "\n";
    }

    private static String html(String title, List<String> notes, Table summary, Table rows,
            List<IChart> charts) {
        StringBuilder b = new StringBuilder("<!DOCTYPE html>\n<html><head><meta charset=\"utf-8\"><title>")
                .append(TableRenderer.escape(title)).append("</title><style>").append(STYLE)
                .append("</style></head><body>\n<h1>").append(TableRenderer.escape(title)).append("</h1>\n");
        for (String note : notes) {
            if (note.isEmpty()) {
                continue;
            }
            b.append("<p>").append(TableRenderer.escape(note)).append("</p>\n");
        }
        if (summary != null) {
            b.append("<h2>Summary</h2>\n");
            table(b, summary);
        }
        for (IChart c : charts) {
            b.append("<img alt=\"").append(TableRenderer.escape(c.getTitle())).append("\" src=\"data:image/png;base64,")
                    .append(Base64.getEncoder().encodeToString(Charts.toPngBytes(c, 1))).append("\">\n");
        }
        b.append("<h2>All rows</h2>\n");
        table(b, rows);
        return b.append("</body></html>\n").toString();
    }

    private static void table(StringBuilder b, Table t) {
        b.append("<table><thead><tr>");
        for (int c = 0; c < t.columnCount(); c++) {
            b.append("<th>").append(TableRenderer.escape(t.column(c).name())).append("</th>");
        }
        b.append("</tr></thead><tbody>\n");
        for (int r = 0; r < t.rowCount(); r++) {
            b.append("<tr>");
            for (int c = 0; c < t.columnCount(); c++) {
                Column<?> col = t.column(c);
                Object v = col.get(r);
                if (numeric(col)) {
                    String s = v == null ? "" : v instanceof Double || v instanceof Float
                            ? TableRenderer.number(((Number) v).doubleValue()) : String.valueOf(v);
                    b.append("<td class=\"n\">").append(TableRenderer.escape(s)).append("</td>");
                } else {
                    b.append("<td>").append(TableRenderer.escape(v == null ? "" : String.valueOf(v))).append("</td>");
                }
            }
            b.append("</tr>\n");
        }
        b.append("</tbody></table>\n");
    }
}
