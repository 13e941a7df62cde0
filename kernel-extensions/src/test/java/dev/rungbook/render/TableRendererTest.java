package dev.rungbook.render;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertFalse;
import static org.junit.jupiter.api.Assertions.assertTrue;

import java.util.Locale;
import org.junit.jupiter.api.Test;
import tech.tablesaw.api.DoubleColumn;
import tech.tablesaw.api.IntColumn;
import tech.tablesaw.api.StringColumn;
import tech.tablesaw.api.Table;

class TableRendererTest {
    @Test
    void formatsNumbersToFourSignificantDigits() {
        assertEquals("0.1235", TableRenderer.number(0.123456));
        assertEquals("12.5", TableRenderer.number(12.5));
        assertEquals("1235", TableRenderer.number(1234.5678));
        assertEquals("-3.142", TableRenderer.number(-Math.PI));
        assertEquals("1.235e+07", TableRenderer.number(12_345_678));
        assertEquals("3.0e-05", TableRenderer.number(0.00003));
        assertEquals("0", TableRenderer.number(0.0));
        assertEquals("NaN", TableRenderer.number(Double.NaN));
        // Source: java.util.Formatter's %.4g gives the same 4 significant digits (its own rounding, outside our code).
        for (double v : new double[] {0.0123456, 0.98765, 7.77777, 543.219}) {
            assertEquals(Double.parseDouble(String.format(Locale.ROOT, "%.4g", v)),
                    Double.parseDouble(TableRenderer.number(v)), 0.0, "value " + v);
        }
    }

    @Test
    void smallTablesShowEveryRowWithRightAlignedNumbers() {
        Table t = Table.create("ranges", StringColumn.create("rule", "min-max", "mse"),
                DoubleColumn.create("scale", 0.0123456, 2.5), IntColumn.create("bits", 8, 4));
        MimeBundle b = TableRenderer.render(t);
        String html = (String) b.data().get(MimeBundle.HTML);
        assertTrue(html.contains("<th class=\"n\">scale</th>"), html);
        assertTrue(html.contains("<th>rule</th>"), html);
        assertTrue(html.contains("<td class=\"n\">0.01235</td>"), html);
        assertTrue(html.contains("<td>min-max</td>"), html);
        assertTrue(html.contains("2 rows &times; 3 columns"), html);
        String text = b.plainText();
        assertEquals(String.join("\n", "ranges",
                "rule     scale    bits",
                "min-max  0.01235     8",
                "mse          2.5     4",
                "2 rows x 3 columns"), text);
    }

    @Test
    void largeTablesShowHeadTailAndRowCount() {
        int n = 100_000;
        int[] ids = new int[n];
        for (int i = 0; i < n; i++) {
            ids[i] = i;
        }
        Table t = Table.create("big", IntColumn.create("id", ids));
        String html = (String) TableRenderer.render(t).data().get(MimeBundle.HTML);
        for (int i = 0; i < TableRenderer.HEAD; i++) {
            assertTrue(html.contains("<td class=\"n\">" + i + "</td>"), "head row " + i);
        }
        for (int i = n - TableRenderer.TAIL; i < n; i++) {
            assertTrue(html.contains("<td class=\"n\">" + i + "</td>"), "tail row " + i);
        }
        assertFalse(html.contains("<td class=\"n\">50000</td>"));
        assertTrue(html.contains("99,985 more rows"), html);
        assertTrue(html.contains("100,000 rows"), html);
        assertTrue(html.length() < 5000, "size does not grow with the table: " + html.length());
    }

    @Test
    void escapesHtmlAndShowsMissingValuesAsEmpty() {
        Table t = Table.create("<t>", StringColumn.create("a&b", "<script>"), DoubleColumn.create("x",
                new double[] {Double.NaN}));
        String html = (String) TableRenderer.render(t).data().get(MimeBundle.HTML);
        assertTrue(html.contains("&lt;script&gt;"), html);
        assertTrue(html.contains("a&amp;b"), html);
        assertFalse(html.contains("<script>"), html);
        assertTrue(html.contains("<td class=\"n\"></td>"), html);
    }
}
