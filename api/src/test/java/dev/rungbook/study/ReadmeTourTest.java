package dev.rungbook.study;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.metrics.ErrorReport;
import dev.rungbook.quant.Quantized;
import dev.rungbook.quant.Quantizer;
import dev.rungbook.range.RangeRule;
import dev.rungbook.round.Rounding;
import dev.rungbook.tensor.FloatFormat;
import dev.rungbook.tensor.Tensor;
import dev.rungbook.testing.Fixtures;
import org.junit.jupiter.api.Test;
import tech.tablesaw.api.Table;

/** The quantizer tour proposed for the README, run as written so that it cannot rot. */
class ReadmeTourTest {
    @Test
    void tourRuns() {
        Tensor w = Tensor.of(Fixtures.gaussian(42, 256 * 512), 256, 512).withName("classifier.0.weight");
        // --- tour start
        Quantizer q = Quantizer.linear(4).perGroup(1, 128).range(RangeRule.mse());
        Quantized r = q.apply(w);
        r.bitsPerWeight();                       // 4.25: 4-bit codes + a float32 scale per 128 weights
        ErrorReport e = r.error();               // mse, sqnrDb, cosine, ... ; e.perChannel() is a Table
        Table t = Study.of(w).compare(
                Quantizer.linear(8),
                q,
                Quantizer.linear(4).asymmetric().rounding(Rounding.stochastic(7)),
                Quantizer.nf4(),
                Quantizer.mx(FloatFormat.E2M1),
                Quantizer.floatFormat(FloatFormat.E4M3),
                Quantizer.codebook(16),
                Quantizer.ternary()).table();
        // --- tour end
        assertEquals("int4 sym per-group(1,128) mse", q.label());
        assertEquals(4.25, r.bitsPerWeight(), 1e-12);
        assertTrue(e.sqnrDb() > 15, "int4 sqnr " + e.sqnrDb());
        assertEquals(8, t.rowCount());
        assertEquals(256, e.perChannel().rowCount());
    }
}
