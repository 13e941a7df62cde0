package dev.rungbook.kernel;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertNull;

import org.junit.jupiter.api.Test;

class RungbookKernelTest {
    @Test
    void recognisesPagerQueries() {
        assertEquals("Math.max", RungbookKernel.pagerQuery("Math.max?"));
        assertEquals("String", RungbookKernel.pagerQuery("  String?\n"));
        assertNull(RungbookKernel.pagerQuery("x ? 1 : 2"));
        assertNull(RungbookKernel.pagerQuery("a > b ?"));
        assertNull(RungbookKernel.pagerQuery("int x = 1;\nx?"));
    }
}
