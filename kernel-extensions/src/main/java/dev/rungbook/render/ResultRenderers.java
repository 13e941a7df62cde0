package dev.rungbook.render;

import dev.rungbook.metrics.ErrorReport;
import dev.rungbook.metrics.TensorStats;
import dev.rungbook.quant.Quantized;
import dev.rungbook.study.StudyResult;
import java.util.Locale;

/**
 * Renderers of the Rungbook API's result types: a compact HTML table plus the type's own {@code toString()} as
 * {@code text/plain}. Registered in {@link Renderers#standard()}.
 */
public final class ResultRenderers {
    private ResultRenderers() {
    }

    /** Statistics of one tensor as a one-row table. */
    public static MimeBundle tensorStats(TensorStats s) {
        return withPlain(TableRenderer.render(s.toTable()), s.toString());
    }

    /** Error metrics as a one-row table. */
    public static MimeBundle errorReport(ErrorReport r) {
        return withPlain(TableRenderer.render(r.toTable()), r.toString());
    }

    /** A study's comparison table. */
    public static MimeBundle studyResult(StudyResult r) {
        return withPlain(TableRenderer.render(r.table()), r.toString());
    }

    /** A quantized tensor: spec, storage and the main error metrics. */
    public static MimeBundle quantized(Quantized q) {
        ErrorReport e = q.error();
        String html = String.format(Locale.ROOT, "<table class=\"rungbook-quantized\"><tr><th>tensor</th><th>spec</th>"
                        + "<th>segments</th><th>bits/weight</th><th>bytes</th><th>rmse</th><th>max |error|</th>"
                        + "<th>SQNR dB</th></tr><tr><td>%s</td><td>%s</td><td>%d</td><td>%.3f</td><td>%,d</td>"
                        + "<td>%.4g</td><td>%.4g</td><td>%.2f</td></tr></table>",
                esc(q.source().label()), esc(q.spec().label()), q.segmentCount(), q.bitsPerWeight(), q.bytes(),
                e.rmse(), e.maxAbsError(), e.sqnrDb());
        return MimeBundle.html(html, q.toString());
    }

    private static MimeBundle withPlain(MimeBundle table, String plain) {
        return table.with(MimeBundle.TEXT, plain);
    }

    private static String esc(String s) {
        return s.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;");
    }
}
