package dev.rungbook.nn;

import dev.rungbook.tensor.Tensor;
import java.util.ArrayList;
import java.util.Arrays;
import java.util.List;
import java.util.Locale;
import java.util.Map;

/**
 * The one-line architecture text of a sequential network, read by {@link Network#fromArchitecture} and written by
 * {@link Network#architecture()}. The sample checkpoints carry it in their {@code architecture} metadata, so a
 * network opens from its file alone. Grammar (whitespace separates tokens; case matters for names only):
 *
 * <pre>
 * text   := chain ( ';' note )*
 * chain  := step ( '-&gt;' step )*
 * step   := 'relu' | 'relu6' | 'identity' | 'flatten'
 *         | ( 'maxpool' | 'avgpool' ) K [ '/' S ]        window K, stride S (default K)
 *         | NAME [ shape ] option*                        a layer whose tensors are NAME.weight, NAME.bias, ...
 * option := 'stride' INT | 'padding' INT | 'eps' NUMBER
 * shape  := '[' INT ( ',' INT )* ']'                       must equal NAME.weight's shape when given
 * note   := 'batch norm eps' NUMBER                       eps of every batch norm without its own
 *         | 'widths' shape                                 the feature counts along the linear layers, checked
 * </pre>
 *
 * A named step is a batch norm when {@code NAME.running_mean} exists, a convolution when {@code NAME.weight} has
 * rank 4 (stride 1 and padding 0 unless given) and a linear layer when it has rank 2. For example
 * {@code conv1 [8,1,3,3] stride 1 padding 1 -> bn1 -> relu -> maxpool 2/2 -> flatten -> fc [4,512]; batch norm eps
 * 1e-5}. Errors name the step and the token.
 */
final class ArchitectureText {
    private ArchitectureText() {
    }

    static Network parse(Map<String, Tensor> tensors, String text) {
        if (text == null || text.isBlank()) {
            throw new IllegalArgumentException("architecture text is empty");
        }
        String[] parts = text.split(";", -1);
        double eps = BatchNorm.DEFAULT_EPS;
        int[] widths = null;
        for (int i = 1; i < parts.length; i++) {
            String note = parts[i].trim();
            String lower = note.toLowerCase(Locale.ROOT);
            if (lower.startsWith("batch norm eps")) {
                eps = number(note.substring("batch norm eps".length()).trim(), "note '" + note + "'");
                if (!(eps > 0)) {
                    throw new IllegalArgumentException("architecture note '" + note + "': eps must be positive");
                }
            } else if (lower.startsWith("widths")) {
                widths = shape(note.substring("widths".length()).trim(), "note '" + note + "'");
            } else {
                throw new IllegalArgumentException("architecture note '" + note
                        + "' is not understood (expected 'batch norm eps NUMBER' or 'widths [..]')");
            }
        }
        Network.Builder b = Network.from(tensors);
        String[] steps = parts[0].split("->", -1);
        for (int i = 0; i < steps.length; i++) {
            String step = steps[i].trim();
            String where = "architecture step " + (i + 1) + " '" + step + "'";
            if (step.isEmpty()) {
                throw new IllegalArgumentException(where + " is empty");
            }
            try {
                b = step(b, tensors, step, eps, where);
            } catch (IllegalArgumentException e) {
                throw e.getMessage().startsWith("architecture") ? e
                        : new IllegalArgumentException(where + ": " + e.getMessage(), e);
            }
        }
        Network net = b.build();
        if (widths != null) {
            checkWidths(net, widths);
        }
        return net;
    }

    private static Network.Builder step(Network.Builder b, Map<String, Tensor> tensors, String step, double eps,
            String where) {
        String[] tok = step.replace("[", " [").split("\\s+", 2);
        String head = tok[0];
        String rest = tok.length > 1 ? tok[1].trim() : "";
        switch (head) {
            case "relu":
            case "relu6":
            case "identity":
            case "flatten":
                if (!rest.isEmpty()) {
                    throw new IllegalArgumentException(where + ": '" + head + "' takes nothing, got '" + rest + "'");
                }
                return head.equals("relu") ? b.relu() : head.equals("relu6") ? b.relu6()
                        : head.equals("identity") ? b.identity() : b.flatten();
            case "maxpool":
            case "avgpool": {
                String[] ks = rest.split("/", -1);
                if (rest.isEmpty() || ks.length > 2) {
                    throw new IllegalArgumentException(where + ": expected '" + head + " K' or '" + head + " K/S'");
                }
                int k = integer(ks[0].trim(), where);
                int s = ks.length == 2 ? integer(ks[1].trim(), where) : k;
                return head.equals("maxpool") ? b.maxPool(k, s) : b.avgPool(k, s);
            }
            default:
                return named(b, tensors, head, rest, eps, where);
        }
    }

    private static Network.Builder named(Network.Builder b, Map<String, Tensor> tensors, String name, String rest,
            double eps, String where) {
        if (!name.matches("[A-Za-z_][A-Za-z0-9_.]*")) {
            throw new IllegalArgumentException(where + ": '" + name + "' is neither a layer kind (relu, relu6, "
                    + "identity, flatten, maxpool, avgpool) nor a tensor name");
        }
        int[] shape = null;
        if (rest.startsWith("[")) {
            int close = rest.indexOf(']');
            if (close < 0) {
                throw new IllegalArgumentException(where + ": '[' without ']'");
            }
            shape = shape(rest.substring(0, close + 1), where);
            rest = rest.substring(close + 1).trim();
        }
        int stride = 1;
        int padding = 0;
        double ownEps = eps;
        String[] opts = rest.isEmpty() ? new String[0] : rest.split("\\s+");
        if (opts.length % 2 != 0) {
            throw new IllegalArgumentException(where + ": option '" + opts[opts.length - 1] + "' has no value");
        }
        boolean isNorm = tensors.containsKey(name + ".running_mean");
        Tensor w = tensors.get(name + ".weight");
        if (w == null) {
            throw new IllegalArgumentException(where + ": no tensor '" + name + ".weight' (a named step reads "
                    + "NAME.weight and NAME.bias, a batch norm also NAME.running_mean and NAME.running_var)");
        }
        for (int i = 0; i < opts.length; i += 2) {
            String key = opts[i];
            String value = opts[i + 1];
            if (key.equals("stride") && !isNorm && w.rank() == 4) {
                stride = integer(value, where);
            } else if (key.equals("padding") && !isNorm && w.rank() == 4) {
                padding = integer(value, where);
            } else if (key.equals("eps") && isNorm) {
                ownEps = number(value, where);
            } else {
                throw new IllegalArgumentException(where + ": option '" + key + "' does not apply to "
                        + (isNorm ? "a batch norm" : w.rank() == 4 ? "a convolution" : "a linear layer")
                        + " (options: convolution stride/padding, batch norm eps)");
            }
        }
        if (shape != null && !isNorm && !Arrays.equals(shape, w.shape())) {
            throw new IllegalArgumentException(where + ": the text says shape " + Arrays.toString(shape) + " but '"
                    + name + ".weight' has " + Arrays.toString(w.shape()));
        }
        if (isNorm) {
            return b.batchNorm(name, ownEps);
        } else if (w.rank() == 4) {
            return b.conv2d(name, stride, padding);
        } else if (w.rank() == 2) {
            return b.linear(name);
        }
        throw new IllegalArgumentException(where + ": '" + name + ".weight' has rank " + w.rank()
                + " (a linear layer needs rank 2, a convolution rank 4)");
    }

    private static void checkWidths(Network net, int[] widths) {
        List<Integer> actual = new ArrayList<>();
        for (Linear l : net.linearLayers()) {
            if (actual.isEmpty()) {
                actual.add(l.inFeatures());
            }
            actual.add(l.outFeatures());
        }
        int[] a = actual.stream().mapToInt(Integer::intValue).toArray();
        if (!Arrays.equals(a, widths)) {
            throw new IllegalArgumentException("architecture note 'widths " + Arrays.toString(widths)
                    + "' does not match the linear layers' widths " + Arrays.toString(a));
        }
    }

    /** The text of {@code net}; parameter-free layers lose their names (they are renumbered when read). */
    static String format(Network net) {
        StringBuilder s = new StringBuilder();
        for (Layer l : net.layers()) {
            if (s.length() > 0) {
                s.append(" -> ");
            }
            if (l instanceof Linear) {
                s.append(l.name()).append(' ').append(shapeText(((Linear) l).weight().shape()));
            } else if (l instanceof Conv2d) {
                Conv2d c = (Conv2d) l;
                s.append(l.name()).append(' ').append(shapeText(c.weight().shape())).append(" stride ")
                        .append(c.stride()).append(" padding ").append(c.padding());
            } else if (l instanceof BatchNorm) {
                s.append(l.name());
                double eps = ((BatchNorm) l).eps();
                if (eps != BatchNorm.DEFAULT_EPS) {
                    s.append(" eps ").append(eps);
                }
            } else if (l instanceof Relu) {
                s.append("relu");
            } else if (l instanceof Relu6) {
                s.append("relu6");
            } else if (l instanceof Identity) {
                s.append("identity");
            } else if (l instanceof Flatten) {
                s.append("flatten");
            } else if (l instanceof Pool2d) {
                Pool2d p = (Pool2d) l;
                s.append(p.isMax() ? "maxpool " : "avgpool ").append(p.kernel()).append('/').append(p.stride());
            } else {
                throw new IllegalStateException("layer '" + l.name() + "' (" + l.getClass().getSimpleName()
                        + ") has no architecture text; only checkpoint-built layers do");
            }
        }
        return s.toString();
    }

    private static String shapeText(int[] shape) {
        StringBuilder s = new StringBuilder("[");
        for (int i = 0; i < shape.length; i++) {
            s.append(i == 0 ? "" : ",").append(shape[i]);
        }
        return s.append(']').toString();
    }

    private static int[] shape(String text, String where) {
        if (!text.startsWith("[") || !text.endsWith("]")) {
            throw new IllegalArgumentException(where + ": expected a shape like [4,256], got '" + text + "'");
        }
        String inner = text.substring(1, text.length() - 1).trim();
        if (inner.isEmpty()) {
            throw new IllegalArgumentException(where + ": empty shape '" + text + "'");
        }
        String[] parts = inner.split(",");
        int[] out = new int[parts.length];
        for (int i = 0; i < parts.length; i++) {
            out[i] = integer(parts[i].trim(), where);
        }
        return out;
    }

    private static int integer(String token, String where) {
        try {
            int v = Integer.parseInt(token);
            if (v < 0) {
                throw new NumberFormatException();
            }
            return v;
        } catch (NumberFormatException e) {
            throw new IllegalArgumentException(where + ": '" + token + "' is not a non-negative integer");
        }
    }

    private static double number(String token, String where) {
        try {
            return Double.parseDouble(token);
        } catch (NumberFormatException e) {
            throw new IllegalArgumentException(where + ": '" + token + "' is not a number");
        }
    }
}
