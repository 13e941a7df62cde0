package dev.rungbook.render;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertTrue;

import java.util.ArrayList;
import java.util.List;
import org.junit.jupiter.api.Test;
import tech.tablesaw.api.IntColumn;
import tech.tablesaw.api.Table;

class RenderersTest {
    /** A result type that knows its table (as API result types will). */
    public static final class Summary {
        /** @return the summary as a table */
        public Table toTable() {
            return Table.create("summary", IntColumn.create("n", 1));
        }

        @Override
        public String toString() {
            return "Summary";
        }
    }

    @Test
    void mostSpecificRegistrationWins() {
        Renderers r = new Renderers()
                .register(List.class, l -> MimeBundle.text("list of " + l.size()))
                .register(ArrayList.class, l -> MimeBundle.text("array list"))
                .register(CharSequence.class, s -> MimeBundle.text("chars"));
        assertEquals("array list", r.render(new ArrayList<>()).plainText());
        assertEquals("list of 2", r.render(List.of(1, 2)).plainText());
        assertEquals("chars", r.render("abc").plainText());
        assertEquals("42", r.render(42).plainText());
        assertEquals("null", r.render(null).plainText());
    }

    @Test
    void typesWithToTableRenderAsTables() {
        MimeBundle b = Renderers.standard().render(new Summary());
        assertTrue(b.data().containsKey(MimeBundle.HTML), b.toString());
        assertTrue(b.plainText().startsWith("summary"), b.plainText());
    }

    @Test
    void failingRendererFallsBackToText() {
        Renderers r = new Renderers().register(String.class, s -> {
            throw new IllegalStateException("broken");
        });
        MimeBundle b = r.render("value");
        assertTrue(b.plainText().startsWith("value"), b.plainText());
        assertTrue(b.plainText().contains("broken"), b.plainText());
    }

    @Test
    void standardRegistryRendersArraysAndTables() {
        Renderers r = Renderers.standard();
        assertEquals("[1.5, 2.0]", r.render(new double[] {1.5, 2}).plainText());
        assertTrue(r.render(Table.create("t")).data().containsKey(MimeBundle.HTML));
    }
}
