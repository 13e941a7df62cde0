package dev.rungbook.quant;

import dev.rungbook.range.RangeRule;
import dev.rungbook.round.LayerRounding;
import dev.rungbook.round.Rounding;
import dev.rungbook.tensor.FloatFormat;
import java.util.ArrayDeque;
import java.util.ArrayList;
import java.util.Deque;
import java.util.LinkedHashMap;
import java.util.List;
import java.util.Map;
import java.util.regex.Matcher;
import java.util.regex.Pattern;

/**
 * The spec text form: a short, one-line text for a {@link Quantizer}, used by the command line ({@code --spec}),
 * by exported checkpoints ({@code __metadata__}) and by plans. {@link #parse} reads it, {@link #format} writes it, and
 * {@code parse(format(q)).equals(q)} holds for every spec that has a text form. {@link Quantizer#parse} and
 * {@link Quantizer#toText} are shortcuts.
 *
 * <h2>Grammar</h2>
 * A spec is a grid followed by options, separated by white space (white space inside brackets is allowed, so
 * {@code per-group(1, 128)} is one token). Names are lower case. Options may come in any order, each kind at most
 * once; an option left out keeps the grid's default (see {@link Quantizer}'s factories).
 *
 * <pre>
 * spec        = grid { option }
 * grid        = "int" B | "uint" B                      linear, B = 2..16 (uint: unsigned codes)
 *             | "fp16" | "bf16" | "fp8-e4m3" | "fp8-e5m2" | "fp6-e3m2" | "fp6-e2m3" | "fp4-e2m1"   scaled float format
 *             | "mx" FORMAT | "mxint8"                   OCP MX, FORMAT one of the five fp8/fp6/fp4 names above
 *             | "nf4" | "log" B | "codebook" K           B = 2..8 for log, K = 2..65536 levels
 *             | "binary" | "ternary" [ "(" T ")" ]       T = threshold factor, default 0.7
 * option      = "sym" | "asym" | "narrow" | "midrise"    linear grids only
 *             | granularity | "pow2-scale" | "unscaled" | range | rounding
 * granularity = "per-tensor" | "per-channel(" AXIS ")" | "per-group(" AXIS "," SIZE ")" | "block(" SIZE ")"
 *                                                       AXIS = "last" or an integer >= -1; block(n) = per-group(last,n)
 * range       = "minmax" | "mse" [ "(" N ")" ] | "p" P | "fixed[" LO "," HI "]" | "running(" M [ "," ROWS ] ")"
 *             | "aciq-laplace" | "aciq-gaussian" | "entropy"
 * rounding    = "nearest-even" | "nearest" | "nearest-away" | "floor" | "ceil" | "stochastic(seed=" S ")"
 *                                                       "nearest" = "nearest-even"; "stochastic(S)" also accepted
 * </pre>
 * Numbers are decimal ({@code 0.5}, {@code -1e-3}); round or square brackets may be used for any argument list.
 * Examples: {@code int8}, {@code int4 per-group(1,128) mse}, {@code uint8 asym per-tensor p99.9},
 * {@code fp8-e4m3 per-tensor}, {@code mxfp4-e2m1}, {@code nf4 block(128)}, {@code log4 per-tensor},
 * {@code codebook16}, {@code ternary(0.5) per-channel(0)}, {@code int4 stochastic(seed=7)}.
 *
 * <h2>What has no text form</h2>
 * Learned roundings ({@link Rounding#adaptive}, {@link Rounding#errorFeedback}) need calibration data, and custom
 * roundings and range rules are code; {@link #format} refuses them and {@link #parse} refuses their labels, each with
 * a message saying so.
 *
 * <h2>Canonical form</h2>
 * {@link #format} writes the grid, then for linear grids {@code sym} or {@code asym}, {@code narrow}, {@code midrise},
 * then the granularity (always, so the text does not depend on defaults), {@code pow2-scale}, the range rule unless
 * min-max, the rounding unless nearest-even. It matches {@link Quantizer#label()} except that an unscaled float
 * format keeps a non-default granularity; labels in study tables therefore parse back.
 *
 * <h2>Errors</h2>
 * {@link #parse} throws {@link SpecSyntaxException} (an {@link IllegalArgumentException}) naming the bad token and
 * its column.
 */
public final class SpecText {
    private static final Pattern INT = Pattern.compile("[+-]?[0-9]+");
    private static final Pattern DECIMAL = Pattern.compile("[+-]?([0-9]+\\.?[0-9]*|\\.[0-9]+)([eE][+-]?[0-9]+)?");
    private static final Pattern SIZED_GRID = Pattern.compile("(uint|int|log|codebook)([0-9]+)");
    private static final Pattern PERCENTILE = Pattern.compile("p(" + DECIMAL.pattern() + ")");
    private static final String GRIDS = "int<bits>, uint<bits>, fp16, bf16, fp8-e4m3, fp8-e5m2, fp6-e3m2, fp6-e2m3, "
            + "fp4-e2m1, mx<format>, mxint8, nf4, log<bits>, codebook<k>, binary, ternary";
    private static final String OPTIONS = "sym, asym, narrow, midrise, per-tensor, per-channel(axis), "
            + "per-group(axis,size), block(size), pow2-scale, unscaled, minmax, mse, mse(n), p<percentile>, "
            + "fixed[lo,hi], running(m[,rows]), aciq-laplace, aciq-gaussian, entropy, nearest-even, nearest-away, "
            + "floor, ceil, stochastic(seed=s)";

    private SpecText() {
    }

    // ---------------------------------------------------------------- tokens

    /** One argument of a token: its text and its offset in the spec. */
    private static final class Arg {
        final String text;
        final int pos;

        Arg(String text, int pos) {
            this.text = text;
            this.pos = pos;
        }
    }

    /** One white-space separated token: {@code name} optionally followed by one bracketed argument list. */
    private static final class Token {
        final String text;
        final int pos;
        final String name;
        final List<Arg> args;
        final boolean bracketed;

        Token(String text, int pos, String name, List<Arg> args, boolean bracketed) {
            this.text = text;
            this.pos = pos;
            this.name = name;
            this.args = args;
            this.bracketed = bracketed;
        }
    }

    /** The parse of one spec text; holds the text for error messages. */
    private static final class Parser {
        final String spec;

        Parser(String spec) {
            this.spec = spec;
        }

        SpecSyntaxException error(String token, int pos, String problem) {
            return new SpecSyntaxException(spec, token, pos, problem);
        }

        SpecSyntaxException error(Token t, String problem) {
            return new SpecSyntaxException(spec, t.text, t.pos, problem);
        }

        SpecSyntaxException error(Token t, String problem, String detail) {
            return new SpecSyntaxException(spec, t.text, t.pos, problem, detail);
        }

        SpecSyntaxException error(Arg a, String problem) {
            return new SpecSyntaxException(spec, a.text, a.pos, problem);
        }

        List<Token> tokens() {
            List<Token> out = new ArrayList<>();
            int n = spec.length();
            int i = 0;
            while (true) {
                while (i < n && Character.isWhitespace(spec.charAt(i))) {
                    i++;
                }
                if (i >= n) {
                    return out;
                }
                int start = i;
                Deque<Integer> open = new ArrayDeque<>();
                while (i < n && (!open.isEmpty() || !Character.isWhitespace(spec.charAt(i)))) {
                    char c = spec.charAt(i);
                    if (c == '(' || c == '[') {
                        open.push(i);
                    } else if (c == ')' || c == ']') {
                        if (open.isEmpty()) {
                            throw error(String.valueOf(c), i, "unmatched closing bracket");
                        }
                        char o = spec.charAt(open.pop());
                        if ((o == '(') != (c == ')')) {
                            throw error(String.valueOf(c), i, "closing bracket does not match '" + o + "':");
                        }
                    }
                    i++;
                }
                if (!open.isEmpty()) {
                    int at = open.getLast();
                    throw error(spec.substring(at, i).strip(), at, "unclosed bracket in");
                }
                out.add(token(spec.substring(start, i), start));
            }
        }

        private Token token(String text, int pos) {
            int b = -1;
            for (int k = 0; k < text.length(); k++) {
                char c = text.charAt(k);
                if (c == '(' || c == '[') {
                    b = k;
                    break;
                }
            }
            if (b < 0) {
                checkName(text, pos, text);
                return new Token(text, pos, text, List.of(), false);
            }
            String name = text.substring(0, b);
            if (name.isEmpty()) {
                throw error(text, pos, "an argument list needs a name before it:");
            }
            checkName(name, pos, text);
            // The tokenizer balanced the brackets; the list must close at the end of the token, without nesting.
            int close = text.length() - 1;
            for (int k = b + 1; k < text.length(); k++) {
                char c = text.charAt(k);
                if (c == '(' || c == '[') {
                    throw error(text.substring(k), pos + k, "nested brackets are not part of the spec text:");
                }
                if (c == ')' || c == ']') {
                    close = k;
                    break;
                }
            }
            if (close != text.length() - 1) {
                throw error(text.substring(close + 1), pos + close + 1, "unexpected text after the argument list:");
            }
            List<Arg> args = new ArrayList<>();
            int from = b + 1;
            for (int k = b + 1; k <= close; k++) {
                if (k == close || text.charAt(k) == ',') {
                    String raw = text.substring(from, k);
                    int lead = 0;
                    while (lead < raw.length() && Character.isWhitespace(raw.charAt(lead))) {
                        lead++;
                    }
                    String a = raw.strip();
                    if (a.isEmpty() && !(k == close && args.isEmpty() && from == close)) {
                        throw error(text, pos, "empty argument in");
                    }
                    if (!a.isEmpty()) {
                        args.add(new Arg(a, pos + from + lead));
                    }
                    from = k + 1;
                }
            }
            return new Token(text, pos, name, args, true);
        }

        private void checkName(String name, int pos, String text) {
            for (int k = 0; k < name.length(); k++) {
                char c = name.charAt(k);
                boolean ok = c >= 'a' && c <= 'z' || c >= '0' && c <= '9' || c == '-' || c == '.';
                if (!ok) {
                    String hint = c >= 'A' && c <= 'Z' ? "names are lower case:" : "unexpected character in";
                    throw error(text, pos, hint);
                }
            }
        }

        // ------------------------------------------------------------ numbers

        long integer(Arg a, String what) {
            if (!INT.matcher(a.text).matches()) {
                throw error(a, what + " must be an integer, got");
            }
            try {
                return Long.parseLong(a.text);
            } catch (NumberFormatException e) {
                throw error(a, what + " is out of range:");
            }
        }

        int smallInt(Arg a, String what) {
            long v = integer(a, what);
            if (v < Integer.MIN_VALUE || v > Integer.MAX_VALUE) {
                throw error(a, what + " is out of range:");
            }
            return (int) v;
        }

        double decimal(Arg a, String what) {
            if (!DECIMAL.matcher(a.text).matches()) {
                throw error(a, what + " must be a decimal number, got");
            }
            double v = Double.parseDouble(a.text);
            if (!Double.isFinite(v)) {
                throw error(a, what + " is out of range:");
            }
            return v;
        }

        void arity(Token t, int min, int max, String form) {
            int n = t.args.size();
            if (n < min || n > max || max == 0 && t.bracketed) {
                throw error(t, max == 0 ? "takes no arguments: write " + form + ", not" : "expects " + form + ", got");
            }
        }

        // ------------------------------------------------------------ grid

        Quantizer grid(Token t) {
            Matcher m = SIZED_GRID.matcher(t.name);
            try {
                if (m.matches()) {
                    arity(t, 0, 0, m.group(1) + "<n>");
                    String digits = m.group(2);
                    if (digits.length() > 6) {
                        throw error(t, "size out of range in");
                    }
                    int n = Integer.parseInt(digits);
                    switch (m.group(1)) {
                        case "int":
                            return Quantizer.linear(n);
                        case "uint":
                            return Quantizer.linear(n).unsigned();
                        case "log":
                            return Quantizer.logarithmic(n);
                        default:
                            return Quantizer.codebook(n);
                    }
                }
                switch (t.name) {
                    case "nf4":
                        arity(t, 0, 0, "nf4");
                        return Quantizer.nf4();
                    case "mxint8":
                        arity(t, 0, 0, "mxint8");
                        return Quantizer.mxInt8();
                    case "binary":
                        arity(t, 0, 0, "binary");
                        return Quantizer.binary();
                    case "ternary":
                        arity(t, 0, 1, "ternary or ternary(factor)");
                        Quantizer q = Quantizer.ternary();
                        return t.args.isEmpty() ? q : q.thresholdFactor(decimal(t.args.get(0), "threshold factor"));
                    default:
                        break;
                }
                for (FloatFormat f : FloatFormat.values()) {
                    String name = Quantizer.formatName(f);
                    if (t.name.equals(name)) {
                        arity(t, 0, 0, name);
                        return Quantizer.floatFormat(f);
                    }
                    if (t.name.equals("mx" + name)) {
                        arity(t, 0, 0, "mx" + name);
                        return Quantizer.mx(f);
                    }
                }
            } catch (SpecSyntaxException e) {
                throw e;
            } catch (IllegalArgumentException e) {
                throw error(t, "bad grid", e.getMessage());
            }
            if (option(t) != null) {
                throw error(t, "a spec starts with its grid, not the option", "grids are " + GRIDS);
            }
            throw error(t, "unknown grid", "grids are " + GRIDS);
        }

        // ------------------------------------------------------------ options

        /** The category an option token belongs to, or null if it is none. */
        String option(Token t) {
            String n = t.name;
            switch (n) {
                case "sym":
                case "asym":
                    return "sign";
                case "narrow":
                    return "narrow";
                case "midrise":
                    return "midrise";
                case "per-tensor":
                case "per-channel":
                case "per-group":
                case "block":
                    return "granularity";
                case "pow2-scale":
                    return "pow2-scale";
                case "unscaled":
                    return "unscaled";
                case "minmax":
                case "mse":
                case "fixed":
                case "running":
                case "aciq-laplace":
                case "aciq-gaussian":
                case "entropy":
                    return "range";
                case "nearest-even":
                case "nearest":
                case "nearest-away":
                case "floor":
                case "ceil":
                case "stochastic":
                case "adaptive":
                case "error-feedback":
                    return "rounding";
                default:
                    return PERCENTILE.matcher(n).matches() ? "range" : null;
            }
        }

        Granularity granularity(Token t) {
            switch (t.name) {
                case "per-tensor":
                    arity(t, 0, 0, "per-tensor");
                    return Granularity.perTensor();
                case "per-channel":
                    arity(t, 1, 1, "per-channel(axis)");
                    return wrap(t, () -> Granularity.perChannel(axis(t.args.get(0))));
                case "per-group":
                    arity(t, 2, 2, "per-group(axis,size)");
                    return wrap(t, () -> Granularity.perGroup(axis(t.args.get(0)),
                            smallInt(t.args.get(1), "group size")));
                default:
                    arity(t, 1, 1, "block(size)");
                    return wrap(t, () -> Granularity.perGroup(-1, smallInt(t.args.get(0), "block size")));
            }
        }

        int axis(Arg a) {
            return a.text.equals("last") ? -1 : smallInt(a, "axis");
        }

        RangeRule range(Token t) {
            switch (t.name) {
                case "minmax":
                    arity(t, 0, 0, "minmax");
                    return RangeRule.minMax();
                case "mse":
                    arity(t, 0, 1, "mse or mse(candidates)");
                    return t.args.isEmpty() ? RangeRule.mse()
                            : wrap(t, () -> RangeRule.mse(smallInt(t.args.get(0), "candidate count")));
                case "fixed":
                    arity(t, 2, 2, "fixed[lo,hi]");
                    return wrap(t, () -> RangeRule.fixed(decimal(t.args.get(0), "lower end"),
                            decimal(t.args.get(1), "upper end")));
                case "running":
                    arity(t, 1, 2, "running(momentum) or running(momentum,rows)");
                    return wrap(t, () -> RangeRule.running(decimal(t.args.get(0), "momentum"),
                            t.args.size() == 2 ? smallInt(t.args.get(1), "rows per batch") : 1));
                case "aciq-laplace":
                    arity(t, 0, 0, "aciq-laplace");
                    return RangeRule.laplace();
                case "aciq-gaussian":
                    arity(t, 0, 0, "aciq-gaussian");
                    return RangeRule.gaussian();
                case "entropy":
                    arity(t, 0, 0, "entropy");
                    return RangeRule.entropy();
                default:
                    arity(t, 0, 0, "p<percentile>");
                    Arg p = new Arg(t.name.substring(1), t.pos + 1);
                    return wrap(t, () -> RangeRule.percentile(decimal(p, "percentile")));
            }
        }

        Rounding rounding(Token t) {
            switch (t.name) {
                case "nearest-even":
                case "nearest":
                    arity(t, 0, 0, t.name);
                    return Rounding.nearest();
                case "nearest-away":
                    arity(t, 0, 0, "nearest-away");
                    return Rounding.nearestTiesAway();
                case "floor":
                    arity(t, 0, 0, "floor");
                    return Rounding.floor();
                case "ceil":
                    arity(t, 0, 0, "ceil");
                    return Rounding.ceil();
                case "stochastic": {
                    arity(t, 1, 1, "stochastic(seed=s)");
                    Arg a = t.args.get(0);
                    if (a.text.startsWith("seed=")) {
                        a = new Arg(a.text.substring(5).strip(), a.pos + 5);
                    }
                    return Rounding.stochastic(integer(a, "seed"));
                }
                default:
                    throw error(t, "learned rounding has no text form:",
                            "it is fitted to calibration data, which a spec text cannot carry; build it in code with "
                                    + "Rounding." + (t.name.equals("adaptive") ? "adaptive" : "errorFeedback")
                                    + "(calibration)");
            }
        }

        interface Step<T> {
            T run();
        }

        /** Runs a factory, turning its refusal into a message that points at the token. */
        <T> T wrap(Token t, Step<T> s) {
            try {
                return s.run();
            } catch (SpecSyntaxException e) {
                throw e;
            } catch (IllegalArgumentException e) {
                throw error(t, "bad value in", e.getMessage());
            }
        }

        Quantizer parse() {
            List<Token> tokens = tokens();
            if (tokens.isEmpty()) {
                throw error("", 0, "empty spec; it starts with a grid (" + GRIDS + ")");
            }
            Quantizer q = grid(tokens.get(0));
            Map<String, Token> seen = new LinkedHashMap<>();
            Granularity g = null;
            RangeRule range = null;
            Rounding rounding = null;
            for (Token t : tokens.subList(1, tokens.size())) {
                String cat = option(t);
                if (cat == null) {
                    if (SIZED_GRID.matcher(t.name).matches() || t.name.equals("nf4") || t.name.startsWith("mx")
                            || t.name.startsWith("fp") || t.name.equals("bf16") || t.name.equals("binary")
                            || t.name.equals("ternary")) {
                        throw error(t, "a spec has one grid, and it comes first; second grid");
                    }
                    throw error(t, "unknown option", "options are " + OPTIONS);
                }
                Token prev = seen.putIfAbsent(cat, t);
                if (prev != null) {
                    throw error(t, "the " + cat + " is already given by '" + prev.text + "' at column "
                            + (prev.pos + 1) + "; repeated");
                }
                switch (cat) {
                    case "granularity":
                        g = granularity(t);
                        break;
                    case "range":
                        range = range(t);
                        break;
                    case "rounding":
                        rounding = rounding(t);
                        break;
                    default:
                        arity(t, 0, 0, t.name);
                        break;
                }
            }
            // Canonical order, so that each step sees the ones it depends on; a refusal names its token.
            Token t = seen.get("sign");
            if (t != null) {
                q = apply(t, q, t.name.equals("asym") ? Quantizer::asymmetric : Quantizer::symmetric);
            }
            if ((t = seen.get("narrow")) != null) {
                q = apply(t, q, Quantizer::narrowRange);
            }
            if ((t = seen.get("midrise")) != null) {
                q = apply(t, q, Quantizer::midRise);
            }
            if ((t = seen.get("granularity")) != null) {
                Granularity fg = g;
                q = apply(t, q, x -> x.granularity(fg));
            }
            if ((t = seen.get("unscaled")) != null) {
                q = apply(t, q, Quantizer::unscaled);
            }
            if ((t = seen.get("pow2-scale")) != null) {
                q = apply(t, q, Quantizer::powerOfTwoScale);
            }
            if ((t = seen.get("range")) != null) {
                RangeRule fr = range;
                q = apply(t, q, x -> x.range(fr));
            }
            if ((t = seen.get("rounding")) != null) {
                Rounding fr = rounding;
                q = apply(t, q, x -> x.rounding(fr));
            }
            return q;
        }

        private Quantizer apply(Token t, Quantizer q, java.util.function.UnaryOperator<Quantizer> step) {
            try {
                return step.apply(q);
            } catch (IllegalArgumentException e) {
                throw error(t, "cannot apply", e.getMessage());
            }
        }
    }

    // ---------------------------------------------------------------- public API

    /**
     * The quantizer a spec text describes (see the class description for the grammar).
     *
     * @throws SpecSyntaxException naming the bad token and its column, for any text that is not a valid spec
     * @throws NullPointerException if {@code text} is null
     */
    public static Quantizer parse(String text) {
        java.util.Objects.requireNonNull(text, "spec text");
        return new Parser(text).parse();
    }

    /**
     * The canonical text of {@code q}, which {@link #parse} turns back into an equal spec.
     *
     * @throws IllegalArgumentException if {@code q} has a learned or custom rounding or a custom range rule, which have
     *     no text form (the message names them)
     */
    public static String format(Quantizer q) {
        StringBuilder b = new StringBuilder();
        switch (q.kind) {
            case LINEAR:
                b.append(q.unsigned ? "uint" : "int").append(q.bits).append(q.symmetric ? " sym" : " asym");
                if (q.narrow) {
                    b.append(" narrow");
                }
                if (q.midRise) {
                    b.append(" midrise");
                }
                break;
            case FLOAT:
                b.append(Quantizer.formatName(q.format));
                break;
            case MX:
                b.append(q.format == null ? "mxint8" : "mx" + Quantizer.formatName(q.format));
                break;
            case NF4:
                b.append("nf4");
                break;
            case LOG:
                b.append("log").append(q.bits);
                break;
            case CODEBOOK:
                b.append("codebook").append(q.bits);
                break;
            case BINARY:
                b.append("binary");
                break;
            default:
                b.append("ternary(").append(q.thresholdFactor).append(')');
                break;
        }
        if (q.kind == Quantizer.Kind.FLOAT && !q.scaled) {
            if (!q.granularity.equals(Granularity.perTensor())) {
                b.append(' ').append(q.granularity.label());
            }
            b.append(" unscaled");
        } else {
            b.append(' ').append(q.granularity.label());
        }
        if (q.pow2) {
            b.append(" pow2-scale");
        }
        if (!q.range.equals(RangeRule.minMax())) {
            b.append(' ').append(rangeText(q));
        }
        if (!q.rounding.equals(Rounding.nearest())) {
            b.append(' ').append(roundingText(q));
        }
        return b.toString();
    }

    /** True if {@code q} has a text form, that is if {@link #format} would not refuse it. */
    public static boolean hasText(Quantizer q) {
        try {
            format(q);
            return true;
        } catch (IllegalArgumentException e) {
            return false;
        }
    }

    private static String rangeText(Quantizer q) {
        String l = q.range.label();
        RangeRule back = rangeBack(l);
        if (back == null || !back.equals(q.range)) {
            throw new IllegalArgumentException(q.label() + ": range rule '" + l + "' has no spec text; only the "
                    + "built-in rules (minmax, mse, p<percentile>, fixed[lo,hi], running(m[,rows]), aciq-laplace, "
                    + "aciq-gaussian, entropy) have one");
        }
        return l;
    }

    private static String roundingText(Quantizer q) {
        String l = q.rounding.label();
        if (q.rounding instanceof LayerRounding) {
            throw new IllegalArgumentException(q.label() + ": rounding '" + l + "' is learned from calibration data "
                    + "and has no spec text; keep the spec in code, or export the quantized result, whose codes "
                    + "carry what was learned");
        }
        if (!q.rounding.equals(roundingBack(l))) {
            throw new IllegalArgumentException(q.label() + ": rounding '" + l + "' is a custom rule and has no spec "
                    + "text; only nearest-even, nearest-away, floor, ceil and stochastic(seed=s) have one");
        }
        return l;
    }

    private static RangeRule rangeBack(String label) {
        try {
            Parser p = new Parser(label);
            List<Token> ts = p.tokens();
            return ts.size() == 1 && "range".equals(p.option(ts.get(0))) ? p.range(ts.get(0)) : null;
        } catch (IllegalArgumentException e) {
            return null;
        }
    }

    private static Rounding roundingBack(String label) {
        try {
            Parser p = new Parser(label);
            List<Token> ts = p.tokens();
            return ts.size() == 1 && "rounding".equals(p.option(ts.get(0))) ? p.rounding(ts.get(0)) : null;
        } catch (IllegalArgumentException e) {
            return null;
        }
    }
}
