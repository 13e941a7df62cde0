package dev.rungbook.quant;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertFalse;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.range.Range;
import dev.rungbook.range.RangeContext;
import dev.rungbook.range.RangeRule;
import dev.rungbook.round.Calibration;
import dev.rungbook.round.Rounding;
import dev.rungbook.tensor.FloatFormat;
import dev.rungbook.tensor.Tensor;
import dev.rungbook.testing.Fixtures;
import java.util.ArrayList;
import java.util.LinkedHashMap;
import java.util.List;
import java.util.Map;
import java.util.Random;
import java.util.function.UnaryOperator;
import org.junit.jupiter.api.Test;

class SpecTextTest {
    /** One spec of every grid kind and every option the core has, built with the fluent API. */
    static List<Quantizer> everyKind() {
        List<Quantizer> q = new ArrayList<>();
        for (int b = 2; b <= 16; b++) {
            q.add(Quantizer.linear(b));
        }
        q.add(Quantizer.linear(8).asymmetric());
        q.add(Quantizer.linear(8).unsigned());
        q.add(Quantizer.linear(8).unsigned().asymmetric().perTensor());
        q.add(Quantizer.linear(8).narrowRange());
        q.add(Quantizer.linear(6).unsigned().narrowRange().asymmetric());
        q.add(Quantizer.linear(3).midRise());
        q.add(Quantizer.linear(4).perGroup(1, 128));
        q.add(Quantizer.linear(4).perGroup(-1, 32));
        q.add(Quantizer.linear(4).perChannel(-1));
        q.add(Quantizer.linear(4).perChannel(2));
        q.add(Quantizer.linear(8).powerOfTwoScale());
        q.add(Quantizer.linear(4).range(RangeRule.mse()));
        q.add(Quantizer.linear(4).range(RangeRule.mse(16)));
        q.add(Quantizer.linear(8).range(RangeRule.percentile(99.9)));
        q.add(Quantizer.linear(8).range(RangeRule.percentile(100)));
        q.add(Quantizer.linear(8).range(RangeRule.percentile(50.000001)));
        q.add(Quantizer.linear(8).asymmetric().range(RangeRule.fixed(-1.25, 3e-7)));
        q.add(Quantizer.linear(8).range(RangeRule.fixed(-0.0, 0.0)));
        q.add(Quantizer.linear(8).range(RangeRule.running(0.9)));
        q.add(Quantizer.linear(8).range(RangeRule.running(0.0, 4)));
        q.add(Quantizer.linear(4).range(RangeRule.laplace()));
        q.add(Quantizer.linear(4).range(RangeRule.gaussian()));
        q.add(Quantizer.linear(8).perTensor().range(RangeRule.entropy()));
        q.add(Quantizer.linear(4).rounding(Rounding.nearestTiesAway()));
        q.add(Quantizer.linear(4).rounding(Rounding.floor()));
        q.add(Quantizer.linear(4).rounding(Rounding.ceil()));
        q.add(Quantizer.linear(4).rounding(Rounding.stochastic(7)));
        q.add(Quantizer.linear(4).rounding(Rounding.stochastic(Long.MIN_VALUE)));
        for (FloatFormat f : FloatFormat.values()) {
            q.add(Quantizer.floatFormat(f));
            q.add(Quantizer.floatFormat(f).unscaled());
            if (f != FloatFormat.F16 && f != FloatFormat.BF16) {
                q.add(Quantizer.mx(f));
            }
        }
        q.add(Quantizer.floatFormat(FloatFormat.E4M3).perChannel(0).powerOfTwoScale().range(RangeRule.mse()));
        q.add(Quantizer.floatFormat(FloatFormat.E5M2).perChannel(0).unscaled());
        q.add(Quantizer.mxInt8());
        q.add(Quantizer.mx(FloatFormat.E2M1).blockSize(16));
        q.add(Quantizer.nf4());
        q.add(Quantizer.nf4().blockSize(128).powerOfTwoScale().range(RangeRule.percentile(99)));
        for (int b = 2; b <= 8; b++) {
            q.add(Quantizer.logarithmic(b));
        }
        q.add(Quantizer.logarithmic(4).perTensor().powerOfTwoScale());
        q.add(Quantizer.codebook(2));
        q.add(Quantizer.codebook(16).perChannel(0));
        q.add(Quantizer.codebook(65536).perGroup(1, 64));
        q.add(Quantizer.binary());
        q.add(Quantizer.binary().perChannel(0));
        q.add(Quantizer.ternary());
        q.add(Quantizer.ternary().thresholdFactor(0.5).perChannel(0));
        q.add(Quantizer.ternary().thresholdFactor(0));
        q.add(Quantizer.ternary().thresholdFactor(1e-9));
        return q;
    }

    @Test
    void everyKindRoundTrips() {
        // Source: the spec built through the fluent API is the independent reference; parse(format(q)) must give an
        // equal spec, and formatting is a fixed point.
        for (Quantizer q : everyKind()) {
            String text = q.toText();
            Quantizer back = Quantizer.parse(text);
            assertEquals(q, back, text);
            assertEquals(text, back.toText());
        }
    }

    @Test
    void labelsParseBack() {
        // Study tables show labels; apart from an unscaled float format's granularity they carry the whole spec.
        for (Quantizer q : everyKind()) {
            if (q.kind == Quantizer.Kind.FLOAT && !q.scaled && !q.granularity().equals(Granularity.perTensor())) {
                continue;
            }
            assertEquals(q, Quantizer.parse(q.label()), q.label());
        }
    }

    @Test
    void readsHandWrittenSpecs() {
        Map<String, Quantizer> m = new LinkedHashMap<>();
        m.put("int8", Quantizer.linear(8));
        m.put("  int4   per-group(1, 128)\tmse ", Quantizer.linear(4).perGroup(1, 128).range(RangeRule.mse()));
        m.put("int4 mse per-group(1,128)", Quantizer.linear(4).perGroup(1, 128).range(RangeRule.mse()));
        m.put("uint8 asym per-tensor p99.9",
                Quantizer.linear(8).unsigned().asymmetric().perTensor().range(RangeRule.percentile(99.9)));
        m.put("int8 midrise narrow", null); // refused below: mid-rise has no code to drop
        m.put("nf4 block(128)", Quantizer.nf4().blockSize(128));
        m.put("mxfp4-e2m1", Quantizer.mx(FloatFormat.E2M1));
        m.put("fp8-e4m3 unscaled", Quantizer.floatFormat(FloatFormat.E4M3).unscaled());
        m.put("int8 fixed(-2, 2.5e0)", Quantizer.linear(8).range(RangeRule.fixed(-2, 2.5)));
        m.put("int4 stochastic(7)", Quantizer.linear(4).rounding(Rounding.stochastic(7)));
        m.put("int4 stochastic(seed=-7)", Quantizer.linear(4).rounding(Rounding.stochastic(-7)));
        m.put("int4 nearest", Quantizer.linear(4));
        m.put("int8 per-channel(last)", Quantizer.linear(8).perChannel(-1));
        m.put("int8 per-channel(-1)", Quantizer.linear(8).perChannel(-1));
        m.put("ternary(.5)", Quantizer.ternary().thresholdFactor(0.5));
        m.put("log4 per-tensor", Quantizer.logarithmic(4).perTensor());
        m.put("codebook16", Quantizer.codebook(16));
        m.put("int8 running(0.9,2)", Quantizer.linear(8).range(RangeRule.running(0.9, 2)));
        for (Map.Entry<String, Quantizer> e : m.entrySet()) {
            if (e.getValue() == null) {
                assertThrows(SpecSyntaxException.class, () -> Quantizer.parse(e.getKey()));
            } else {
                assertEquals(e.getValue(), Quantizer.parse(e.getKey()), e.getKey());
            }
        }
        // The parsed spec quantizes exactly as the fluent one.
        Tensor w = Tensor.of(Fixtures.gaussian(3, 4 * 256), 4, 256);
        Quantized a = Quantizer.parse("int4 per-group(1,128) mse").apply(w);
        Quantized b = Quantizer.linear(4).perGroup(1, 128).range(RangeRule.mse()).apply(w);
        assertEquals(a.codes(), b.codes());
    }

    /** The refusal of {@code text}, checking that it names {@code token} at {@code position}. */
    private static SpecSyntaxException refused(String text, String token, int position, String fragment) {
        SpecSyntaxException e = assertThrows(SpecSyntaxException.class, () -> Quantizer.parse(text), text);
        assertEquals(token, e.token(), text + " -> " + e.getMessage());
        assertEquals(position, e.position(), text + " -> " + e.getMessage());
        assertEquals(text, e.spec());
        assertTrue(e.getMessage().contains("'" + token + "' at column " + (position + 1)), e.getMessage());
        assertTrue(e.getMessage().contains(fragment), e.getMessage());
        return e;
    }

    @Test
    void badSpecsNameTheTokenAndItsColumn() {
        refused("int4 per-grup(1,128)", "per-grup(1,128)", 5, "unknown option");
        refused("int17", "int17", 0, "2 to 16 bits");
        refused("int1", "int1", 0, "2 to 16 bits");
        refused("INT8", "INT8", 0, "lower case");
        refused("float8", "float8", 0, "unknown grid");
        refused("per-tensor int8", "per-tensor", 0, "starts with its grid");
        refused("int8 nf4", "nf4", 5, "one grid");
        refused("int8 per-group(1,x)", "x", 17, "group size must be an integer");
        refused("int8 per-group(1,0)", "per-group(1,0)", 5, "group size must be at least 1");
        refused("int8 per-group(1)", "per-group(1)", 5, "per-group(axis,size)");
        refused("int8 per-channel(-2)", "per-channel(-2)", 5, "-1 (last) or non-negative");
        refused("int8 p40", "p40", 5, "(50, 100]");
        refused("int8 p", "p", 5, "unknown option");
        refused("int8 fixed[2,1]", "fixed[2,1]", 5, "lo <= hi");
        refused("int8 fixed[1,NaN]", "NaN", 13, "decimal number");
        refused("int8 fixed[1,1e999]", "1e999", 13, "out of range");
        refused("int8 mse(3)", "mse(3)", 5, "at least 4");
        refused("int8 running(1.0)", "running(1.0)", 5, "[0, 1)");
        refused("int8 per-tensor per-channel(0)", "per-channel(0)", 16, "already given by 'per-tensor' at column 6");
        refused("int8 floor ceil", "ceil", 11, "rounding is already given");
        refused("int8 sym asym", "asym", 9, "sign is already given");
        refused("nf4 asym", "asym", 4, "applies to linear grids");
        refused("nf4 floor", "floor", 4, "rounds to the nearest level");
        refused("mxfp4-e2m1 pow2-scale", "pow2-scale", 11, "power-of-two scales apply");
        refused("fp8-e4m3 unscaled mse", "mse", 18, "scaled float");
        refused("mxfp16", "mxfp16", 0, "MX element formats");
        refused("int8 midrise asym", "midrise", 5, "mid-rise");
        refused("binary mse", "mse", 7, "not binary grids");
        refused("ternary(-1)", "ternary(-1)", 0, "threshold factor must be finite");
        refused("ternary(1,2)", "ternary(1,2)", 0, "ternary or ternary(factor)");
        refused("nf4()", "nf4()", 0, "takes no arguments");
        refused("int8 per-group(1,128", "(1,128", 14, "unclosed bracket");
        refused("int8 per-tensor)", ")", 15, "unmatched closing bracket");
        refused("int8 fixed[1,2)", ")", 14, "does not match");
        refused("int8 per-group(1,(2))", "(2))", 17, "nested brackets");
        refused("int8 block(4)x", "x", 13, "unexpected text after");
        refused("int8 block(4,)", "block(4,)", 5, "empty argument");
        refused("int8 stochastic(seed=1.5)", "1.5", 21, "seed must be an integer");
        refused("int8 stochastic(seed=99999999999999999999)", "99999999999999999999", 21, "out of range");
        refused("codebook70000", "codebook70000", 0, "2 to 65536 levels");
        refused("codebook99999999", "codebook99999999", 0, "size out of range");
        refused("int8 per-group(99999999999,2)", "99999999999", 15, "axis is out of range");
        refused("int8 nearest-even()", "nearest-even()", 5, "takes no arguments");
        SpecSyntaxException empty = assertThrows(SpecSyntaxException.class, () -> Quantizer.parse("   "));
        assertEquals(0, empty.position());
        assertTrue(empty.getMessage().contains("empty spec"), empty.getMessage());
    }

    @Test
    void learnedAndCustomRulesHaveNoText() {
        Calibration cal = Calibration.of(Tensor.of(Fixtures.gaussian(5, 8 * 16), 8, 16));
        for (Rounding learned : new Rounding[] {Rounding.adaptive(cal), Rounding.errorFeedback(cal)}) {
            Quantizer q = Quantizer.linear(4).rounding(learned);
            IllegalArgumentException e = assertThrows(IllegalArgumentException.class, q::toText);
            assertTrue(e.getMessage().contains("learned from calibration data"), e.getMessage());
            assertFalse(SpecText.hasText(q));
            // Its label does not parse either, and the message says why.
            String text = "int4 " + learned.label();
            SpecSyntaxException p = assertThrows(SpecSyntaxException.class, () -> Quantizer.parse(text));
            assertEquals(5, p.position());
            assertTrue(p.getMessage().contains("learned rounding has no text form"), p.getMessage());
            assertTrue(p.getMessage().contains("calibration"), p.getMessage());
        }
        // A custom rule that calls itself "floor" is still not floor.
        Quantizer custom = Quantizer.linear(4).rounding(Rounding.custom("floor", (x, i) -> Math.floor(x)));
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class, custom::toText);
        assertTrue(e.getMessage().contains("custom rule"), e.getMessage());
        RangeRule mine = new RangeRule() {
            @Override
            public String label() {
                return "mse";
            }

            @Override
            public Range range(float[] values, int from, int to, RangeContext ctx) {
                return new Range(-1, 1);
            }
        };
        IllegalArgumentException r = assertThrows(IllegalArgumentException.class,
                () -> Quantizer.linear(4).range(mine).toText());
        assertTrue(r.getMessage().contains("range rule 'mse' has no spec text"), r.getMessage());
        assertTrue(SpecText.hasText(Quantizer.linear(4)));
    }

    @Test
    void randomFluentSpecsRoundTrip() {
        // Brute force over combinations of fluent steps: every spec the API accepts has a text that parses back to it.
        List<UnaryOperator<Quantizer>> steps = List.of(Quantizer::asymmetric, Quantizer::symmetric,
                Quantizer::unsigned, Quantizer::narrowRange, Quantizer::midRise, Quantizer::perTensor,
                x -> x.perChannel(1), x -> x.perGroup(-1, 16), x -> x.blockSize(8), Quantizer::powerOfTwoScale,
                Quantizer::unscaled, x -> x.range(RangeRule.mse(10)), x -> x.range(RangeRule.percentile(99.5)),
                x -> x.range(RangeRule.laplace()), x -> x.range(RangeRule.fixed(-3, 1.5)),
                x -> x.rounding(Rounding.floor()), x -> x.rounding(Rounding.stochastic(3)),
                x -> x.thresholdFactor(0.25));
        List<Quantizer> grids = List.of(Quantizer.linear(4), Quantizer.linear(8), Quantizer.floatFormat(FloatFormat.E4M3),
                Quantizer.mx(FloatFormat.E3M2), Quantizer.mxInt8(), Quantizer.nf4(), Quantizer.logarithmic(3),
                Quantizer.codebook(5), Quantizer.binary(), Quantizer.ternary());
        Random rnd = new Random(11);
        java.util.Set<String> distinct = new java.util.HashSet<>();
        for (int trial = 0; trial < 4000; trial++) {
            Quantizer q = grids.get(rnd.nextInt(grids.size()));
            int n = rnd.nextInt(5);
            for (int k = 0; k < n; k++) {
                try {
                    q = steps.get(rnd.nextInt(steps.size())).apply(q);
                } catch (IllegalArgumentException refusedStep) {
                    // the API refused this step for this grid; keep the spec as it was
                }
            }
            assertEquals(q, Quantizer.parse(q.toText()), q.toText());
            distinct.add(q.toText());
        }
        assertTrue(distinct.size() > 150, "only " + distinct.size() + " distinct specs");
    }
}
