package dev.rungbook.quant;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertTrue;
import static org.junit.jupiter.api.Assertions.fail;

import dev.rungbook.metrics.ErrorReport;
import dev.rungbook.range.RangeRule;
import dev.rungbook.round.Rounding;
import dev.rungbook.study.Study;
import dev.rungbook.tensor.FloatFormat;
import dev.rungbook.tensor.Tensor;
import dev.rungbook.testing.Fixtures;
import java.io.IOException;
import java.io.UncheckedIOException;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.ArrayList;
import java.util.LinkedHashMap;
import java.util.List;
import java.util.Map;
import java.util.Objects;
import java.util.TreeMap;
import java.util.stream.Stream;
import org.junit.jupiter.api.AfterAll;
import org.junit.jupiter.params.ParameterizedTest;
import org.junit.jupiter.params.provider.Arguments;
import org.junit.jupiter.params.provider.MethodSource;
import tech.tablesaw.api.DoubleColumn;
import tech.tablesaw.api.Table;
import tech.tablesaw.columns.Column;

/**
 * Numeric hostility (issue 9): every grid, every range rule and every element rounding rule against NaN, infinities,
 * denormals, all-zero and all-equal tensors and channels, one-element and empty tensors, values near
 * {@link Float#MAX_VALUE} and a dynamic range of 10^60 inside one channel. Each (spec, input) cell must either be
 * refused with an {@link IllegalArgumentException} naming the tensor and the problem, or be handled: finite
 * dequantized values, the exact values that follow from the grid's definition where the case allows exactness (an
 * all-zero segment dequantizes to exact zeros on a grid with a zero level; a constant segment to the constant on a
 * grid whose top level is the segment's max), and no NaN in the {@link ErrorReport} or the {@link Study} table.
 *
 * <p>The expected values are derived from the grid definitions in the {@link Quantizer} Javadoc (the quantizer's own
 * documentation is the specification here), not from the engine: a symmetric linear min-max grid puts
 * {@code max|x|} on code {@code qmax}; NF4 and logarithmic grids put the absolute maximum on level 1; XNOR-Net's
 * alpha of a constant is that constant; a ternary threshold 0.7 * mean|w| keeps every element of a constant.
 *
 * <p>Each outcome is recorded and written to {@code api/target/numeric-hostility.tsv} for docs/make_reliability.py.
 */
class NumericHostilityTest {
    /** Outcomes by "input\tfamily" -> counts of handled / refused cells. */
    private static final Map<String, int[]> OUTCOMES = new TreeMap<>();
    /** Refusal reasons by "input\tfamily". */
    private static final Map<String, java.util.SortedSet<String>> REASONS = new TreeMap<>();

    // ------------------------------------------------------------------ the specs

    /** A spec under test, with the family it counts in. */
    record Spec(String family, Quantizer q) {
        @Override
        public String toString() {
            return q.label();
        }
    }

    static List<Spec> grids() {
        List<Spec> s = new ArrayList<>();
        for (int bits : new int[] {2, 4, 8, 16}) {
            s.add(new Spec("linear", Quantizer.linear(bits)));
        }
        s.add(new Spec("linear", Quantizer.linear(8).asymmetric()));
        s.add(new Spec("linear", Quantizer.linear(4).asymmetric()));
        s.add(new Spec("linear", Quantizer.linear(8).unsigned()));
        s.add(new Spec("linear", Quantizer.linear(8).unsigned().asymmetric()));
        s.add(new Spec("linear", Quantizer.linear(8).narrowRange()));
        s.add(new Spec("linear", Quantizer.linear(8).asymmetric().narrowRange()));
        s.add(new Spec("linear", Quantizer.linear(8).powerOfTwoScale()));
        s.add(new Spec("linear", Quantizer.linear(4).asymmetric().powerOfTwoScale()));
        s.add(new Spec("linear", Quantizer.linear(4).midRise()));
        s.add(new Spec("linear", Quantizer.linear(8).perTensor()));
        s.add(new Spec("linear", Quantizer.linear(8).asymmetric().perTensor()));
        s.add(new Spec("linear", Quantizer.linear(4).perGroup(1, 16)));
        s.add(new Spec("linear", Quantizer.linear(4).asymmetric().perGroup(1, 16)));
        s.add(new Spec("linear", Quantizer.linear(4).perChannel(1)));
        s.add(new Spec("codebook", Quantizer.codebook(4)));
        s.add(new Spec("codebook", Quantizer.codebook(16).perChannel(0)));
        s.add(new Spec("nf4", Quantizer.nf4()));
        s.add(new Spec("nf4", Quantizer.nf4().blockSize(16).powerOfTwoScale()));
        s.add(new Spec("float", Quantizer.floatFormat(FloatFormat.E4M3)));
        s.add(new Spec("float", Quantizer.floatFormat(FloatFormat.E5M2).perChannel(0)));
        s.add(new Spec("float", Quantizer.floatFormat(FloatFormat.E2M1).perGroup(1, 16)));
        s.add(new Spec("float", Quantizer.floatFormat(FloatFormat.E4M3).powerOfTwoScale()));
        s.add(new Spec("float", Quantizer.floatFormat(FloatFormat.F16).unscaled()));
        s.add(new Spec("float", Quantizer.floatFormat(FloatFormat.BF16).unscaled()));
        s.add(new Spec("float", Quantizer.floatFormat(FloatFormat.BF16)));
        for (FloatFormat f : new FloatFormat[] {FloatFormat.E4M3, FloatFormat.E5M2, FloatFormat.E3M2,
            FloatFormat.E2M3, FloatFormat.E2M1}) {
            s.add(new Spec("mx", Quantizer.mx(f)));
        }
        s.add(new Spec("mx", Quantizer.mxInt8()));
        s.add(new Spec("binary", Quantizer.binary()));
        s.add(new Spec("binary", Quantizer.binary().perChannel(0)));
        s.add(new Spec("ternary", Quantizer.ternary()));
        s.add(new Spec("ternary", Quantizer.ternary().perChannel(0)));
        s.add(new Spec("log", Quantizer.logarithmic(4)));
        s.add(new Spec("log", Quantizer.logarithmic(8).perTensor().powerOfTwoScale()));
        return s;
    }

    static List<RangeRule> rangeRules() {
        return List.of(RangeRule.minMax(), RangeRule.fixed(-1, 1), RangeRule.percentile(99),
                RangeRule.running(0.9), RangeRule.mse(), RangeRule.entropy(), RangeRule.laplace(),
                RangeRule.gaussian());
    }

    /** Every range rule on every grid that takes one (4-bit grids so that entropy calibration has enough values). */
    static List<Spec> ranged() {
        List<Spec> s = new ArrayList<>();
        for (RangeRule r : rangeRules()) {
            String fam = "range " + r.label().replaceAll("[\\[(].*", "");
            s.add(new Spec(fam, Quantizer.linear(4).perTensor().range(r)));
            s.add(new Spec(fam, Quantizer.linear(4).asymmetric().perTensor().range(r)));
            s.add(new Spec(fam, Quantizer.linear(4).unsigned().perTensor().range(r)));
            s.add(new Spec(fam, Quantizer.linear(8).range(r)));
            s.add(new Spec(fam, Quantizer.floatFormat(FloatFormat.E2M1).range(r)));
            s.add(new Spec(fam, Quantizer.nf4().perTensor().range(r)));
            s.add(new Spec(fam, Quantizer.logarithmic(4).perTensor().range(r)));
        }
        return s;
    }

    static List<Rounding> roundings() {
        return List.of(Rounding.nearest(), Rounding.nearestTiesAway(), Rounding.floor(), Rounding.ceil(),
                Rounding.stochastic(7), Rounding.custom("toward-zero", (x, i) -> x < 0 ? Math.ceil(x)
                        : Math.floor(x)));
    }

    static List<Spec> rounded() {
        List<Spec> s = new ArrayList<>();
        for (Rounding r : roundings()) {
            String fam = "rounding " + r.label().replaceAll("\\(.*", "");
            s.add(new Spec(fam, Quantizer.linear(8).rounding(r)));
            s.add(new Spec(fam, Quantizer.linear(4).asymmetric().perTensor().rounding(r)));
            s.add(new Spec(fam, Quantizer.linear(4).perGroup(1, 16).rounding(r)));
        }
        return s;
    }

    // ------------------------------------------------------------------ the inputs

    /** A hostile input and the values it is made of. */
    enum Case {
        NAN, POS_INF, NEG_INF, DENORMAL, ALL_ZERO, ZERO_CHANNEL, ALL_EQUAL, ALL_EQUAL_NEGATIVE, EQUAL_CHANNEL,
        ONE_ELEMENT, SCALAR, EMPTY_ROWS, EMPTY_COLUMNS, NEAR_MAX, HUGE_RANGE;

        /** The constant of the all-equal inputs: not a power of two, not exact in binary. */
        static final float C = 0.3f;

        String tensorName() {
            return "hostile." + name().toLowerCase(java.util.Locale.ROOT);
        }

        Tensor tensor() {
            int rows = 4;
            int cols = 64;
            float[] g = Fixtures.gaussian(ordinal() + 11, rows * cols);
            float[] v;
            int[] shape = {rows, cols};
            switch (this) {
                case NAN:
                    v = g;
                    v[70] = Float.NaN;
                    break;
                case POS_INF:
                    v = g;
                    v[3] = Float.POSITIVE_INFINITY;
                    break;
                case NEG_INF:
                    v = g;
                    v[255] = Float.NEGATIVE_INFINITY;
                    break;
                case DENORMAL: {
                    // integer multiples of the smallest subnormal, |k| <= 1000: all below Float.MIN_NORMAL
                    java.util.Random r = Fixtures.random(5);
                    v = new float[rows * cols];
                    for (int i = 0; i < v.length; i++) {
                        v[i] = (r.nextInt(2001) - 1000) * Float.MIN_VALUE;
                    }
                    v[0] = 1000 * Float.MIN_VALUE;
                    break;
                }
                case ALL_ZERO:
                    v = new float[rows * cols];
                    break;
                case ZERO_CHANNEL:
                    v = g;
                    java.util.Arrays.fill(v, cols, 2 * cols, 0f);
                    break;
                case ALL_EQUAL:
                    v = new float[rows * cols];
                    java.util.Arrays.fill(v, C);
                    break;
                case ALL_EQUAL_NEGATIVE:
                    v = new float[rows * cols];
                    java.util.Arrays.fill(v, -C);
                    break;
                case EQUAL_CHANNEL:
                    v = g;
                    java.util.Arrays.fill(v, 2 * cols, 3 * cols, 2.5f);
                    break;
                case ONE_ELEMENT:
                    v = new float[] {C};
                    shape = new int[] {1, 1};
                    break;
                case SCALAR:
                    v = new float[] {C};
                    shape = new int[0];
                    break;
                case EMPTY_ROWS:
                    v = new float[0];
                    shape = new int[] {0, cols};
                    break;
                case EMPTY_COLUMNS:
                    v = new float[0];
                    shape = new int[] {rows, 0};
                    break;
                case NEAR_MAX:
                    v = g;
                    for (int i = 0; i < v.length; i++) {
                        v[i] = (float) Math.max(-3.0e38, Math.min(3.0e38, v[i] * 1e38));
                    }
                    v[1] = Float.MAX_VALUE;
                    v[2] = -Float.MAX_VALUE;
                    v[cols + 5] = Float.MAX_VALUE;
                    break;
                default: // HUGE_RANGE: row 0 spans 1e-30 .. 1e30
                    v = g;
                    v[0] = 1e30f;
                    v[1] = -1e30f;
                    v[2] = 1e-30f;
                    v[3] = -1e-30f;
                    v[4] = 0f;
                    break;
            }
            return Tensor.of(v, shape).withName(tensorName());
        }
    }

    // ------------------------------------------------------------------ expectations from the grid definitions

    private static boolean linear(Quantizer q) {
        return q.kind == Quantizer.Kind.LINEAR;
    }

    /** True if the grid has a level at exactly 0 whatever the segment (so zero inputs stay zero). */
    private static boolean hasZeroLevel(Quantizer q) {
        return !(linear(q) && q.midRise) && q.kind != Quantizer.Kind.BINARY && q.kind != Quantizer.Kind.CODEBOOK;
    }

    /** True for a range rule that keeps a constant segment's value inside the range it returns. */
    private static boolean keepsConstant(RangeRule r) {
        return r.equals(RangeRule.minMax()) || r.label().startsWith("p") || r.label().startsWith("running")
                || r.label().startsWith("mse") || r.label().startsWith("aciq");
    }

    /**
     * True if a segment whose values all equal {@code c} must dequantize to exactly {@code c}: the grid definition
     * puts the segment's max|x| (or max, or min for asymmetric grids) on a level.
     */
    private static boolean constantIsExact(Quantizer q, float c) {
        switch (q.kind) {
            case LINEAR:
                if (q.midRise || q.pow2 || !keepsConstant(q.range)) {
                    return false;
                }
                return !(q.unsigned && q.symmetric && c < 0);
            case FLOAT:
                // the scale c / max must be a normal float32 to carry the 24 bits that make fl(s * max) = c
                return q.scaled && !q.pow2 && keepsConstant(q.range)
                        && Math.abs(c) / q.format.max() >= Float.MIN_NORMAL;
            case NF4:
            case LOG:
                return !q.pow2 && keepsConstant(q.range);
            case BINARY:
            case TERNARY:
                return true;
            default:
                return false; // MX rounds v / 2^e to the element format; codebooks refuse k > distinct values
        }
    }

    /** True if the top of the grid is the segment's max|x| for min-max grids (the largest value is exact). */
    private static boolean topIsExact(Quantizer q) {
        return (linear(q) && !q.midRise && !q.pow2 && q.symmetric && !q.unsigned
                || q.kind == Quantizer.Kind.FLOAT && q.scaled && !q.pow2
                || (q.kind == Quantizer.Kind.NF4 || q.kind == Quantizer.Kind.LOG) && !q.pow2)
                && q.range.equals(RangeRule.minMax());
    }

    /** The refusals a spec may give a finite input, each named by the words its message must contain. */
    private static String allowedRefusal(Quantizer q, Tensor t, String message) {
        if (message.contains("does not divide dimension")) {
            return "group does not fit";
        }
        if (message.contains("entropy calibration needs at least")) {
            return "too few values for entropy";
        }
        if (q.kind == Quantizer.Kind.CODEBOOK && message.contains("exceeds the")
                && message.contains("distinct")) {
            return "fewer distinct values than levels";
        }
        if (t.rank() == 0 && message.contains("is out of range for shape []")) {
            return "a scalar has no axis";
        }
        if (t.name().equals(Case.NEAR_MAX.tensorName())
                && message.contains("this grid's levels reach beyond the float32 range")) {
            return "a level beyond float32";
        }
        return null;
    }

    // ------------------------------------------------------------------ the matrix

    static Stream<Arguments> matrix() {
        List<Spec> all = new ArrayList<>(grids());
        all.addAll(ranged());
        all.addAll(rounded());
        List<Arguments> a = new ArrayList<>();
        for (Spec s : all) {
            for (Case c : Case.values()) {
                a.add(Arguments.of(s.family(), s.q(), c));
            }
        }
        return a.stream();
    }

    @ParameterizedTest(name = "{2} on {1}")
    @MethodSource("matrix")
    void eachCellIsHandledExactlyOrRefusedClearly(String family, Quantizer q, Case c) {
        Tensor t = c.tensor();
        Quantized r;
        try {
            r = q.apply(t);
        } catch (IllegalArgumentException e) {
            String m = Objects.requireNonNullElse(e.getMessage(), "");
            assertTrue(m.contains(t.label()), "refusal must name the tensor: " + m);
            String why;
            if (c == Case.NAN || c == Case.POS_INF || c == Case.NEG_INF) {
                String bad = c == Case.NAN ? "NaN" : (c == Case.POS_INF ? "Infinity" : "-Infinity");
                assertTrue(m.contains("value " + bad + " at index"), "refusal must name the bad value: " + m);
                assertTrue(m.contains("NaN and infinite values cannot be quantized"), m);
                why = "non-finite value";
            } else {
                why = allowedRefusal(q, t, m);
                if (why == null) {
                    fail(c + " on " + q.label() + " was refused without a documented reason: " + m);
                }
            }
            record(c, family, why);
            return;
        }
        if (c == Case.NAN || c == Case.POS_INF || c == Case.NEG_INF) {
            fail(c + " on " + q.label() + " was quantized instead of refused: " + r);
        }
        checkHandled(q, c, t, r);
        record(c, family, null);
    }

    /** Counts a cell: handled if {@code refusal} is null, else refused for that reason. */
    private static synchronized void record(Case c, String family, String refusal) {
        String key = c.name().toLowerCase(java.util.Locale.ROOT) + "\t" + family;
        OUTCOMES.computeIfAbsent(key, k -> new int[2])[refusal == null ? 0 : 1]++;
        if (refusal != null) {
            REASONS.computeIfAbsent(key, k -> new java.util.TreeSet<>()).add(refusal);
        }
    }

    private static void checkHandled(Quantizer q, Case c, Tensor t, Quantized r) {
        float[] x = t.toFloatArray();
        float[] y = r.dequantized().toFloatArray();
        String where = c + " on " + q.label();
        assertEquals(x.length, y.length, where);
        assertEquals(x.length, r.codes().size(), where);
        for (int i = 0; i < y.length; i++) {
            if (!Float.isFinite(y[i])) {
                fail(where + ": dequantized value " + y[i] + " at " + i + " for input " + x[i]);
            }
        }
        for (float s : r.scales().toFloatArray()) {
            assertTrue(Float.isFinite(s) && s >= 0, where + ": scale " + s);
        }
        checkReport(where, r.error(), x, y);
        checkStudy(where, t, q);
        int cols = t.rank() == 2 ? t.dim(1) : 0;
        switch (c) {
            case ALL_ZERO:
                // Every grid maps an all-zero segment to 0: its scale cannot grow from zero, and 0 is a level of
                // every grid but the mid-rise one (whose smallest levels +-s/2 must then vanish with s).
                for (int i = 0; i < y.length; i++) {
                    assertEquals(0f, Math.abs(y[i]), where + " index " + i);
                }
                break;
            case ZERO_CHANNEL:
                if (hasZeroLevel(q)) {
                    for (int i = cols; i < 2 * cols; i++) {
                        assertEquals(0f, Math.abs(y[i]), where + " index " + i);
                    }
                }
                break;
            case ALL_EQUAL:
            case ALL_EQUAL_NEGATIVE:
            case ONE_ELEMENT:
            case SCALAR: {
                float k = x[0];
                boolean exact = constantIsExact(q, k);
                for (int i = 0; i < y.length; i++) {
                    // a constant stays a constant on every grid
                    assertEquals(y[0], y[i], where + " index " + i);
                    if (exact) {
                        assertEquals(k, y[i], where + " index " + i);
                    }
                }
                if (q.kind == Quantizer.Kind.FLOAT && (!q.scaled || keepsConstant(q.range))) {
                    // any float format: within half an ulp of the format at k (relative 2^-(mantissa bits + 1))
                    double halfUlp = Math.abs(k) * Math.scalb(1.0, -(q.format.mantissaBits() + 1));
                    assertEquals(k, y[0], halfUlp * (1 + 1e-6), where);
                }
                if (exact) {
                    assertEquals(0.0, r.error().mse(), where);
                    assertEquals(Double.POSITIVE_INFINITY, r.error().sqnrDb(), where);
                }
                break;
            }
            case EQUAL_CHANNEL: {
                boolean perRow = q.granularity().kind() == Granularity.Kind.CHANNEL && q.granularity().axis() == 0;
                if (perRow && constantIsExact(q, 2.5f)) {
                    for (int i = 2 * cols; i < 3 * cols; i++) {
                        assertEquals(2.5f, y[i], where + " index " + i);
                    }
                }
                break;
            }
            case NEAR_MAX:
            case HUGE_RANGE: {
                float top = c == Case.NEAR_MAX ? Float.MAX_VALUE : 1e30f;
                if (topIsExact(q)) {
                    // The scale is the float32 nearest max|x| / qmax for which fl(s * qmax) = max|x| if one exists
                    // (Scales.fit); for Float.MAX_VALUE none may, and the top level is then one ulp below.
                    double tol = c == Case.NEAR_MAX ? Math.ulp(top) : 0;
                    assertEquals(top, y[c == Case.NEAR_MAX ? 1 : 0], tol, where + ": the top value is a level");
                    assertEquals(-top, y[c == Case.NEAR_MAX ? 2 : 1], tol, where + ": minus the top is a level");
                }
                boolean nearestType = q.rounding().equals(Rounding.nearest())
                        || q.rounding().equals(Rounding.nearestTiesAway());
                if (c == Case.HUGE_RANGE && hasZeroLevel(q) && q.range.equals(RangeRule.minMax()) && nearestType
                        && q.kind != Quantizer.Kind.TERNARY && q.format != FloatFormat.BF16) {
                    // 1e-30 is 1e-60 of the channel's top: far below half the smallest nonzero level of every grid
                    // but bfloat16 (whose range, 2^-133 .. 3.4e38, holds both; it is checked below)
                    assertEquals(0f, Math.abs(y[2]), where);
                    assertEquals(0f, Math.abs(y[3]), where);
                    assertEquals(0f, Math.abs(y[4]), where);
                }
                if (c == Case.HUGE_RANGE && q.format == FloatFormat.BF16 && q.kind == Quantizer.Kind.FLOAT) {
                    // 1e-30 is a normal bfloat16 number: kept to within half an ulp (relative 2^-8)
                    assertEquals(1e-30, y[2], 1e-30 * 0x1p-8, where);
                    assertEquals(-1e-30, y[3], 1e-30 * 0x1p-8, where);
                }
                break;
            }
            case DENORMAL: {
                if (linear(q) && q.range.equals(RangeRule.minMax()) && q.rounding().equals(Rounding.nearest())
                        && !q.midRise) {
                    // nearest rounding without clipping: every error is at most half a step (plus the float32
                    // rounding of the product, here at most one subnormal ulp)
                    float[] sc = r.scales().toFloatArray();
                    double smax = 0;
                    for (float s : sc) {
                        smax = Math.max(smax, s);
                    }
                    for (int i = 0; i < y.length; i++) {
                        boolean clamped = q.unsigned && q.symmetric && x[i] < 0;
                        if (!clamped) {
                            assertTrue(Math.abs((double) y[i] - x[i]) <= smax / 2 + Float.MIN_VALUE,
                                    where + " index " + i + ": " + x[i] + " -> " + y[i] + " step " + smax);
                        }
                    }
                }
                break;
            }
            default:
                break;
        }
    }

    /** No metric is NaN; infinity only where the ErrorReport documents it (exact or zero-signal results). */
    private static void checkReport(String where, ErrorReport e, float[] x, float[] y) {
        double[] v = e.values();
        for (int k = 0; k < v.length; k++) {
            String metric = ErrorReport.METRICS.get(k);
            assertTrue(!Double.isNaN(v[k]), where + ": " + metric + " is NaN");
            if (Double.isInfinite(v[k])) {
                boolean exact = e.mse() == 0;
                boolean zeroSignal = java.util.Arrays.equals(x, new float[x.length]);
                boolean allowed = metric.equals("sqnr_db") && (exact && v[k] > 0 || zeroSignal && v[k] < 0)
                        || metric.equals("rel_frobenius") && zeroSignal && !exact;
                assertTrue(allowed, where + ": " + metric + " is " + v[k]);
            }
        }
        checkTable(where + " per channel", e.perChannel());
    }

    private static void checkTable(String where, Table t) {
        for (Column<?> col : t.columns()) {
            if (col instanceof DoubleColumn) {
                DoubleColumn d = (DoubleColumn) col;
                for (int i = 0; i < d.size(); i++) {
                    double v = d.getDouble(i);
                    assertTrue(!Double.isNaN(v), where + ": column " + d.name() + " row " + i + " is NaN");
                    assertTrue(!Double.isInfinite(v) || d.name().startsWith("sqnr") || d.name().startsWith("rel_"),
                            where + ": column " + d.name() + " row " + i + " is " + v);
                }
            }
        }
    }

    private static void checkStudy(String where, Tensor t, Quantizer q) {
        Map<String, Tensor> m = new LinkedHashMap<>();
        m.put(t.name(), t);
        checkTable(where + " study", Study.of(m).compare(q).table());
    }

    // ------------------------------------------------------------------ the bugs this matrix found, one by one

    @org.junit.jupiter.api.Test
    void midRiseGridMapsAnAllZeroChannelToZero() {
        // Found by the matrix: the all-zero row got scale 1 and the level s/2 = 0.5. Worked from the mid-rise
        // definition (Quantizer.midRise Javadoc): row 1 has a = 1, s = a / 2^(b-1) = 1/8, top level a - s/2 = 0.9375.
        Quantized r = Quantizer.linear(4).midRise().apply(Tensor.of(new float[] {0, 0, 1, -1}, 2, 2).withName("m"));
        assertEquals(List.of(0f, 0f, 0.9375f, -0.9375f), boxed(r.dequantized().toFloatArray()));
    }

    @org.junit.jupiter.api.Test
    void directedRoundingKeepsValuesThatAreLevels() {
        // Found by the matrix: x / s for x on a level came out as 126.99999999 (the float32 scale is rounded), so
        // floor moved -0.3 to code -128 and ceil 1e30 to 126. int8 sym on max|x| = 0.3: codes -127 and 127 are the
        // levels -0.3 and 0.3 (fl(s * 127) = 0.3 by construction of the scale).
        Tensor t = Tensor.of(new float[] {-0.3f, 0.3f, 0.3f, -0.3f}, 1, 4).withName("d");
        for (Rounding rule : List.of(Rounding.floor(), Rounding.ceil(), Rounding.stochastic(1))) {
            Quantized r = Quantizer.linear(8).rounding(rule).apply(t);
            assertEquals(List.of(-127, 127, 127, -127), java.util.Arrays.stream(r.codes().toIntArray()).boxed()
                    .collect(java.util.stream.Collectors.toList()), rule.label());
            assertEquals(boxed(t.toFloatArray()), boxed(r.dequantized().toFloatArray()), rule.label());
        }
    }

    @org.junit.jupiter.api.Test
    void gridsWhoseLevelsOverflowFloat32AreRefused() {
        // Found by the matrix: asymmetric int8 on [-MAX, MAX] has s = 2 MAX / 255 and zero point 0, so code -128
        // stands for -128 s = -1.0039 MAX, which is -Infinity in float32; NF4 with a power-of-two scale rounded
        // MAX up to 2^128 (Infinity) and dequantized level 0 to NaN.
        Tensor t = Tensor.of(new float[] {Float.MAX_VALUE, -Float.MAX_VALUE, 1f, 0f}, 1, 4).withName("big");
        for (Quantizer q : List.of(Quantizer.linear(8).asymmetric(), Quantizer.nf4().blockSize(4).powerOfTwoScale(),
                Quantizer.mxInt8().blockSize(4))) {
            IllegalArgumentException e = org.junit.jupiter.api.Assertions.assertThrows(
                    IllegalArgumentException.class, () -> q.apply(t), q.label());
            assertTrue(e.getMessage().startsWith("tensor 'big': value "), e.getMessage());
            assertTrue(e.getMessage().contains("this grid's levels reach beyond the float32 range"), e.getMessage());
        }
        // the symmetric min-max grid keeps every level within float32: +-MAX land one ulp inside at worst
        float[] y = Quantizer.linear(8).apply(t).dequantized().toFloatArray();
        assertEquals(Float.MAX_VALUE, y[0], Math.ulp(Float.MAX_VALUE));
        assertEquals(-Float.MAX_VALUE, y[1], Math.ulp(Float.MAX_VALUE));
    }

    @org.junit.jupiter.api.Test
    void reliabilityPageListsEveryInput() throws IOException {
        // docs/reliability.md is rebuilt by docs/make_reliability.py from target/numeric-hostility.tsv; a new input
        // must reach the page (rerun the script after this test class).
        String page = Files.readString(Path.of("../docs/reliability.md"));
        for (Case c : Case.values()) {
            String row = "| " + c.name().toLowerCase(java.util.Locale.ROOT).replace('_', ' ') + " |";
            assertTrue(page.contains(row), "docs/reliability.md has no numeric row " + row
                    + "; run python3 docs/make_reliability.py");
        }
    }

    private static List<Float> boxed(float[] v) {
        List<Float> l = new ArrayList<>();
        for (float f : v) {
            l.add(f);
        }
        return l;
    }

    // ------------------------------------------------------------------ figures for docs/reliability.md

    @AfterAll
    static void writeOutcomes() {
        int cells = OUTCOMES.values().stream().mapToInt(v -> v[0] + v[1]).sum();
        if (cells != matrix().count()) {
            return; // a partial run (one method or a filter) must not replace the figures of a full one
        }
        StringBuilder b = new StringBuilder("input\tfamily\thandled\trefused\trefusals\n");
        for (Map.Entry<String, int[]> e : OUTCOMES.entrySet()) {
            b.append(e.getKey()).append('\t').append(e.getValue()[0]).append('\t').append(e.getValue()[1])
                    .append('\t').append(String.join("; ", REASONS.getOrDefault(e.getKey(), new java.util.TreeSet<>())))
                    .append('\n');
        }
        try {
            Path out = Path.of("target", "numeric-hostility.tsv");
            Files.createDirectories(out.getParent());
            Files.writeString(out, b.toString());
        } catch (IOException e) {
            throw new UncheckedIOException(e);
        }
    }
}
