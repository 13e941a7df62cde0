package dev.rungbook.runner;

import com.google.gson.JsonArray;
import com.google.gson.JsonElement;
import com.google.gson.JsonObject;
import java.util.List;
import java.util.regex.Matcher;
import java.util.regex.Pattern;

/**
 * A self-contained HTML page of an executed notebook: markdown cells rendered simply (headings, paragraphs, bullet
 * and numbered lists, pipe tables, code spans, bold, italics, links, fenced code), code cells with their source and
 * outputs, images inline as base64 data URLs.
 */
public final class HtmlReport {
    private static final String STYLE = "body{font-family:system-ui,sans-serif;max-width:1000px;margin:2em auto;"
            + "padding:0 1em;color:#222;line-height:1.45}pre{background:#f6f8fa;padding:.6em;overflow-x:auto;"
            + "font-size:13px}.src{border-left:3px solid #6a8fd0}.out{margin:.3em 0 1.2em 0}.prompt{color:#888;"
            + "font-size:12px;font-family:monospace}.stderr{background:#fff3f0}.error{background:#fde8e8;"
            + "color:#8a1111}table{border-collapse:collapse;font-size:13px;margin:.4em 0}td,th{border:1px solid #ccc;"
            + "padding:2px 6px;text-align:right}th{background:#eef}img{max-width:100%}code{background:#f0f0f0;"
            + "padding:0 3px}";

    private HtmlReport() {
    }

    /** The page of {@code notebook} (nbformat 4) titled {@code title}. */
    public static String render(JsonObject notebook, String title) {
        StringBuilder h = new StringBuilder();
        h.append("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"><title>").append(esc(title))
                .append("</title><style>").append(STYLE).append("</style></head><body>\n");
        for (JsonElement c : notebook.getAsJsonArray("cells")) {
            JsonObject cell = c.getAsJsonObject();
            String type = cell.has("cell_type") ? cell.get("cell_type").getAsString() : "";
            String source = Json.text(cell.get("source"));
            if (type.equals("markdown")) {
                h.append(markdown(source));
            } else if (type.equals("code")) {
                JsonElement n = cell.get("execution_count");
                String count = n == null || n.isJsonNull() ? " " : n.getAsString();
                h.append("<div class=\"prompt\">In [").append(count).append("]:</div><pre class=\"src\">")
                        .append(esc(source)).append("</pre>\n<div class=\"out\">");
                JsonArray outputs = cell.has("outputs") ? cell.getAsJsonArray("outputs") : new JsonArray();
                for (JsonElement o : outputs) {
                    h.append(output(o.getAsJsonObject()));
                }
                h.append("</div>\n");
            }
        }
        return h.append("</body></html>\n").toString();
    }

    private static String output(JsonObject o) {
        String type = o.get("output_type").getAsString();
        switch (type) {
            case "stream": {
                String name = o.has("name") ? o.get("name").getAsString() : "stdout";
                return "<pre class=\"" + (name.equals("stderr") ? "stderr" : "stdout") + "\">"
                        + esc(Json.text(o.get("text"))) + "</pre>\n";
            }
            case "error": {
                StringBuilder tb = new StringBuilder();
                tb.append(o.get("ename").getAsString()).append(": ").append(Json.text(o.get("evalue"))).append('\n');
                if (o.has("traceback")) {
                    for (JsonElement l : o.getAsJsonArray("traceback")) {
                        tb.append(l.getAsString()).append('\n');
                    }
                }
                return "<pre class=\"error\">" + esc(tb.toString()) + "</pre>\n";
            }
            default: {
                JsonObject data = o.has("data") ? o.getAsJsonObject("data") : new JsonObject();
                if (data.has("image/png")) {
                    return "<img alt=\"" + esc(Json.text(data.get("text/plain"))) + "\" src=\"data:image/png;base64,"
                            + Json.text(data.get("image/png")).replace("\n", "") + "\">\n";
                }
                if (data.has("text/html")) {
                    return "<div>" + Json.text(data.get("text/html")) + "</div>\n";
                }
                if (data.has("image/svg+xml")) {
                    return "<div>" + Json.text(data.get("image/svg+xml")) + "</div>\n";
                }
                return "<pre>" + esc(Json.text(data.get("text/plain"))) + "</pre>\n";
            }
        }
    }


    /** The text of the notebook's first level-1 markdown heading, or null. */
    static String firstHeading(JsonObject notebook) {
        for (JsonElement c : notebook.getAsJsonArray("cells")) {
            JsonObject cell = c.getAsJsonObject();
            if (cell.has("cell_type") && cell.get("cell_type").getAsString().equals("markdown")) {
                for (String line : Json.text(cell.get("source")).split("\n")) {
                    if (line.startsWith("# ")) {
                        return line.substring(2).strip();
                    }
                }
            }
        }
        return null;
    }

    /** Simple markdown: headings, paragraphs, lists, pipe tables, fenced code, inline code/bold/italic/links. */
    static String markdown(String md) {
        StringBuilder out = new StringBuilder();
        List<String> lines = md.lines().toList();
        int i = 0;
        while (i < lines.size()) {
            String line = lines.get(i);
            String t = line.strip();
            if (t.isEmpty()) {
                i++;
            } else if (t.startsWith("```")) {
                StringBuilder code = new StringBuilder();
                i++;
                while (i < lines.size() && !lines.get(i).strip().startsWith("```")) {
                    code.append(lines.get(i)).append('\n');
                    i++;
                }
                i++;
                out.append("<pre>").append(esc(code.toString())).append("</pre>\n");
            } else if (t.matches("#{1,6}\\s.*")) {
                int level = t.indexOf(' ');
                out.append("<h").append(level).append('>').append(inline(t.substring(level).strip())).append("</h")
                        .append(level).append(">\n");
                i++;
            } else if (t.matches("[-*+]\\s.*") || t.matches("\\d+[.)]\\s.*")) {
                boolean ordered = Character.isDigit(t.charAt(0));
                out.append(ordered ? "<ol>" : "<ul>");
                while (i < lines.size()) {
                    String l = lines.get(i).strip();
                    if (ordered ? l.matches("\\d+[.)]\\s.*") : l.matches("[-*+]\\s.*")) {
                        out.append("<li>").append(inline(l.replaceFirst("^(\\d+[.)]|[-*+])\\s+", "")));
                    } else if (!l.isEmpty() && lines.get(i).startsWith(" ")) {
                        out.append(' ').append(inline(l));
                    } else {
                        break;
                    }
                    i++;
                }
                out.append(ordered ? "</ol>\n" : "</ul>\n");
            } else if (t.startsWith("|") && i + 1 < lines.size() && lines.get(i + 1).strip().matches("\\|[-:| ]+\\|?")) {
                out.append("<table><tr>");
                for (String cellText : row(t)) {
                    out.append("<th>").append(inline(cellText)).append("</th>");
                }
                out.append("</tr>");
                i += 2;
                while (i < lines.size() && lines.get(i).strip().startsWith("|")) {
                    out.append("<tr>");
                    for (String cellText : row(lines.get(i).strip())) {
                        out.append("<td>").append(inline(cellText)).append("</td>");
                    }
                    out.append("</tr>");
                    i++;
                }
                out.append("</table>\n");
            } else {
                StringBuilder p = new StringBuilder();
                while (i < lines.size()) {
                    String l = lines.get(i).strip();
                    if (l.isEmpty() || l.startsWith("#") || l.startsWith("```") || l.startsWith("|")
                            || l.matches("[-*+]\\s.*") || l.matches("\\d+[.)]\\s.*")) {
                        break;
                    }
                    p.append(p.length() > 0 ? " " : "").append(l);
                    i++;
                }
                out.append("<p>").append(inline(p.toString())).append("</p>\n");
            }
        }
        return out.toString();
    }

    private static String[] row(String line) {
        String s = line.strip();
        if (s.startsWith("|")) {
            s = s.substring(1);
        }
        if (s.endsWith("|")) {
            s = s.substring(0, s.length() - 1);
        }
        String[] parts = s.split("\\|", -1);
        for (int k = 0; k < parts.length; k++) {
            parts[k] = parts[k].strip();
        }
        return parts;
    }

    private static final Pattern CODE = Pattern.compile("`([^`]+)`");

    /** Inline markup: code spans first (their content is not formatted), then bold, italics and links. */
    static String inline(String text) {
        StringBuilder out = new StringBuilder();
        Matcher m = CODE.matcher(text);
        int last = 0;
        while (m.find()) {
            out.append(emphasis(esc(text.substring(last, m.start()))));
            out.append("<code>").append(esc(m.group(1))).append("</code>");
            last = m.end();
        }
        out.append(emphasis(esc(text.substring(last))));
        return out.toString();
    }

    private static String emphasis(String escaped) {
        return escaped.replaceAll("\\*\\*(.+?)\\*\\*", "<strong>$1</strong>")
                .replaceAll("(?<![\\w*])\\*(?!\\s)(.+?)(?<!\\s)\\*(?![\\w*])", "<em>$1</em>")
                // Links only to web addresses, anchors and relative paths (no javascript: or data: URLs).
                .replaceAll("\\[([^\\]]+)\\]\\(((?:https?://|#|\\.{0,2}/|[\\w-]+\\.)[^)\\s]*)\\)",
                        "<a href=\"$2\">$1</a>");
    }

    /** HTML-escapes text. */
    static String esc(String s) {
        return s.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;").replace("\"", "&quot;");
    }
}
