package dev.rungbook.runner;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertFalse;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.metrics.ErrorReport;
import dev.rungbook.metrics.TensorStats;
import dev.rungbook.quant.Quantized;
import dev.rungbook.quant.Quantizer;
import dev.rungbook.render.MimeBundle;
import dev.rungbook.render.Renderers;
import dev.rungbook.study.StudyResult;
import dev.rungbook.study.Study;
import dev.rungbook.tensor.Tensor;
import org.junit.jupiter.api.Test;

/** The markdown subset of the HTML report, and the renderers of the API's result types. */
class ReportAndRenderersTest {
    private static final Tensor W = Tensor.of(new float[] {-1f, -0.5f, 0f, 0.25f, 0.5f, 1f, 2f, -2f}, 2, 4)
            .withName("w");

    @Test
    void markdownSubset() {
        String html = HtmlReport.markdown("## Range <rules>\n\nA **bold** and *italic* `x<y` word.\n\n"
                + "- one\n- two\n\n1. first\n2. second\n\n| a | b |\n| --- | --- |\n| 1 | 2 |\n\n"
                + "[ok](https://example.org/x) [bad](javascript:alert(1))");
        assertTrue(html.contains("<h2>Range &lt;rules&gt;</h2>"), html);
        assertTrue(html.contains("<strong>bold</strong>") && html.contains("<em>italic</em>"), html);
        assertTrue(html.contains("<code>x&lt;y</code>"), html);
        assertTrue(html.contains("<ul><li>one<li>two</ul>"), html);
        assertTrue(html.contains("<ol><li>first<li>second</ol>"), html);
        assertTrue(html.contains("<table><tr><th>a</th><th>b</th></tr><tr><td>1</td><td>2</td></tr></table>"), html);
        assertTrue(html.contains("<a href=\"https://example.org/x\">ok</a>"), html);
        assertFalse(html.contains("href=\"javascript"), html);
    }

    @Test
    void resultTypesRenderAsHtmlTablesWithTheirOwnPlainText() {
        Renderers r = Renderers.standard();
        Quantized q = Quantizer.linear(4).perChannel(0).apply(W);
        MimeBundle qb = r.render(q);
        assertEquals(q.toString(), qb.plainText());
        String html = (String) qb.data().get(MimeBundle.HTML);
        assertTrue(html.contains(q.spec().label()) && html.contains("<table"), html);

        TensorStats s = TensorStats.of(W);
        assertEquals(s.toString(), r.render(s).plainText());
        assertTrue(((String) r.render(s).data().get(MimeBundle.HTML)).contains("<table"));

        ErrorReport e = q.error();
        assertEquals(e.toString(), r.render(e).plainText());
        assertTrue(((String) r.render(e).data().get(MimeBundle.HTML)).contains("<table"));

        StudyResult study = Study.of(W).compare(Quantizer.linear(8), Quantizer.linear(4));
        MimeBundle sb = r.render(study);
        assertEquals(study.toString(), sb.plainText());
        assertTrue(((String) sb.data().get(MimeBundle.HTML)).contains("int4"), sb.data().toString());
    }
}
