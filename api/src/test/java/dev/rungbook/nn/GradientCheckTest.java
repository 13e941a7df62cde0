package dev.rungbook.nn;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.tensor.Tensor;
import dev.rungbook.testing.Fixtures;
import java.util.ArrayList;
import java.util.List;
import java.util.Random;
import org.junit.jupiter.api.Test;

/**
 * Each layer's backward pass against central finite differences {@code (f(p + h) - f(p - h)) / 2h} of a
 * double-precision reference of its forward pass ({@link Reference}), with {@code h = 1e-5}: the difference quotient
 * is then accurate to about 1e-9, so the check measures the float backward pass, not the quotient.
 */
class GradientCheckTest {
    private static final double H = 1e-5;

    /** A layer and its reference function. */
    record Case(Layer layer, Reference.Fn ref) {
    }

    private static double[][] params(Node node) {
        List<Node.Param> ps = node.params();
        double[][] p = new double[ps.size()][];
        for (int i = 0; i < p.length; i++) {
            p[i] = Reference.toDouble(ps.get(i).value);
        }
        return p;
    }

    private static double dot(double[] a, double[] b) {
        double s = 0;
        for (int i = 0; i < a.length; i++) {
            s += a[i] * b[i];
        }
        return s;
    }

    /**
     * Checks the layer's forward pass against the reference and its gradients (input and every parameter) for the
     * scalar {@code L = sum r * y} with random {@code r}.
     */
    static void check(String what, Case c, Tensor input) {
        Node node = Node.of(c.layer(), q -> null);
        float[] xf = input.toFloatArray();
        Node.Act y = node.forward(new Node.Act(xf, input.shape()), true);
        double[] x = Reference.toDouble(xf);
        double[][] p = params(node);
        Reference.Out ref = c.ref().apply(x, input.shape(), p);
        assertEquals(java.util.Arrays.toString(ref.shape()), java.util.Arrays.toString(y.shape()), what);
        for (int i = 0; i < ref.v().length; i++) {
            assertEquals(ref.v()[i], y.v()[i], 1e-5 * (1 + Math.abs(ref.v()[i])), what + " forward " + i);
        }
        double[] r = Reference.toDouble(Fixtures.gaussian(what.hashCode(), ref.v().length));
        float[] rf = new float[r.length];
        for (int i = 0; i < r.length; i++) {
            rf[i] = (float) r[i];
        }
        for (Node.Param q : node.params()) {
            q.zeroGrad();
        }
        Node.Act gx = node.backward(new Node.Act(rf, y.shape()), true);
        int checked = 0;
        for (int i = 0; i < x.length; i++) {
            double keep = x[i];
            x[i] = keep + H;
            double up = dot(r, c.ref().apply(x, input.shape(), p).v());
            x[i] = keep - H;
            double down = dot(r, c.ref().apply(x, input.shape(), p).v());
            x[i] = keep;
            double numeric = (up - down) / (2 * H);
            assertEquals(numeric, gx.v()[i], 1e-4 * (1 + Math.abs(numeric)), what + " d/dx " + i);
            checked++;
        }
        List<Node.Param> ps = node.params();
        for (int k = 0; k < p.length; k++) {
            for (int i = 0; i < p[k].length; i++) {
                double keep = p[k][i];
                p[k][i] = keep + H;
                double up = dot(r, c.ref().apply(x, input.shape(), p).v());
                p[k][i] = keep - H;
                double down = dot(r, c.ref().apply(x, input.shape(), p).v());
                p[k][i] = keep;
                double numeric = (up - down) / (2 * H);
                assertEquals(numeric, ps.get(k).grad[i], 1e-4 * (1 + Math.abs(numeric)),
                        what + " d/d" + ps.get(k).name + " " + i);
                checked++;
            }
        }
        assertTrue(checked >= x.length, what);
    }

    private static Tensor input(long seed, double scale, int... shape) {
        Tensor t = LayersTest.random(seed, shape);
        float[] v = t.toFloatArray();
        for (int i = 0; i < v.length; i++) {
            v[i] *= (float) scale;
        }
        return Tensor.of(v, shape);
    }

    @Test
    void linear() {
        Linear l = new Linear("fc", LayersTest.random(1, 4, 6), LayersTest.random(2, 4));
        check("linear", new Case(l, Reference::linear), input(3, 1, 5, 6));
    }

    @Test
    void convolutionWithStrideAndPadding() {
        int[][] cases = {{1, 0}, {2, 1}, {1, 2}};
        for (int[] sp : cases) {
            Conv2d conv = new Conv2d("conv", LayersTest.random(4, 3, 2, 3, 2), LayersTest.random(5, 3), sp[0], sp[1]);
            check("conv stride " + sp[0] + " pad " + sp[1], new Case(conv, (x, s, p) -> Reference.conv(x, s, p[0],
                    conv.weight().shape(), p[1], sp[0], sp[1])), input(6, 1, 2, 2, 5, 6));
        }
    }

    @Test
    void batchNormInTrainingModeAfterConvAndAfterLinear() {
        BatchNorm bn = new BatchNorm("bn", Tensor.of(new float[] {1.5f, -0.7f, 0.9f}, 3),
                Tensor.of(new float[] {0.2f, -0.1f, 0.4f}, 3), Tensor.of(new float[3], 3),
                Tensor.of(new float[] {1, 1, 1}, 3), 1e-3);
        Case c = new Case(bn, (x, s, p) -> Reference.batchNormTraining(x, s, p, 1e-3));
        check("batch norm [N, C, H, W]", c, input(7, 2, 3, 3, 2, 3));
        check("batch norm [N, C]", c, input(8, 2, 6, 3));
    }

    @Test
    void batchNormUpdatesRunningStatisticsDuringTraining() {
        // Source: running = 0.9 running + 0.1 batch, with the unbiased variance (common practice).
        Tensor x = input(9, 3, 4, 2);
        Node node = BatchNorm.initial("bn", 2).node();
        node.forward(new Node.Act(x.toFloatArray(), x.shape()), true);
        BatchNorm after = (BatchNorm) node.layer();
        for (int c = 0; c < 2; c++) {
            double mean = 0;
            for (int i = 0; i < 4; i++) {
                mean += x.get(i, c) / 4;
            }
            double ss = 0;
            for (int i = 0; i < 4; i++) {
                ss += (x.get(i, c) - mean) * (x.get(i, c) - mean);
            }
            assertEquals(0.1 * mean, after.mean().getFlat(c), 1e-6);
            assertEquals(0.9 + 0.1 * ss / 3, after.variance().getFlat(c), 1e-5);
        }
    }

    @Test
    void activationsPoolingAndFlatten() {
        check("relu", new Case(new Relu("r"), (x, s, p) -> Reference.clip(x, s, 0, Double.POSITIVE_INFINITY)),
                input(10, 1, 3, 7));
        check("relu6", new Case(new Relu6("r6"), (x, s, p) -> Reference.clip(x, s, 0, 6)), input(11, 4, 3, 9));
        check("identity", new Case(new Identity("i"), (x, s, p) -> new Reference.Out(x.clone(), s)),
                input(12, 1, 2, 3));
        check("flatten", new Case(new Flatten("f"), (x, s, p) -> new Reference.Out(x.clone(),
                new int[] {s[0], x.length / s[0]})), input(13, 1, 2, 3, 2, 2));
        check("max pool 2/2", new Case(Pool2d.max("p", 2, 2), (x, s, p) -> Reference.pool(x, s, 2, 2, true)),
                input(14, 1, 2, 2, 4, 6));
        check("max pool 3/1", new Case(Pool2d.max("p", 3, 1), (x, s, p) -> Reference.pool(x, s, 3, 1, true)),
                input(15, 1, 1, 2, 5, 5));
        check("avg pool 2/1", new Case(Pool2d.average("p", 2, 1), (x, s, p) -> Reference.pool(x, s, 2, 1, false)),
                input(16, 1, 2, 2, 4, 3));
    }

    @Test
    void wholeConvNetCrossEntropyGradients() {
        // The chain rule across every layer kind at once: the trainer's gradient of the mean cross-entropy against
        // central differences of the composed double references.
        Network net = LayersTest.convNet(60);
        List<Node> nodes = new ArrayList<>();
        List<Reference.Fn> refs = new ArrayList<>();
        for (Layer l : net.layers()) {
            nodes.add(Node.of(l, q -> null));
            refs.add(reference(l));
        }
        List<Node.Param> params = new ArrayList<>();
        nodes.forEach(n -> params.addAll(n.params()));
        Tensor x = input(61, 1, 6, 2, 8, 8);
        int[] labels = {0, 1, 2, 2, 1, 0};
        double loss = Trainer.lossAndGradients(nodes, params, new Node.Act(x.toFloatArray(), x.shape()), labels);
        double[][][] p = new double[nodes.size()][][];
        for (int i = 0; i < p.length; i++) {
            p[i] = params(nodes.get(i));
        }
        double[] xd = Reference.toDouble(x.toFloatArray());
        assertEquals(composedLoss(refs, xd, x.shape(), p, labels), loss, 1e-5);
        Random pick = new Random(62);
        int checked = 0;
        for (int l = 0; l < p.length; l++) {
            List<Node.Param> ps = nodes.get(l).params();
            for (int k = 0; k < p[l].length; k++) {
                for (int t = 0; t < 6; t++) {
                    int i = pick.nextInt(p[l][k].length);
                    double keep = p[l][k][i];
                    p[l][k][i] = keep + H;
                    double up = composedLoss(refs, xd, x.shape(), p, labels);
                    p[l][k][i] = keep - H;
                    double down = composedLoss(refs, xd, x.shape(), p, labels);
                    p[l][k][i] = keep;
                    double numeric = (up - down) / (2 * H);
                    assertEquals(numeric, ps.get(k).grad[i], 1e-4 * (1 + Math.abs(numeric)),
                            ps.get(k).name + " " + i);
                    checked++;
                }
            }
        }
        assertEquals(6 * 10, checked);
    }

    private static double composedLoss(List<Reference.Fn> refs, double[] x, int[] shape, double[][][] p,
            int[] labels) {
        Reference.Out a = new Reference.Out(x, shape);
        for (int i = 0; i < refs.size(); i++) {
            a = refs.get(i).apply(a.v(), a.shape(), p[i]);
        }
        return Reference.crossEntropy(a.v(), a.shape()[1], labels);
    }

    private static Reference.Fn reference(Layer l) {
        if (l instanceof Conv2d) {
            Conv2d c = (Conv2d) l;
            return (x, s, p) -> Reference.conv(x, s, p[0], c.weight().shape(), p[1], c.stride(), c.padding());
        } else if (l instanceof Linear) {
            return Reference::linear;
        } else if (l instanceof BatchNorm) {
            return (x, s, p) -> Reference.batchNormTraining(x, s, p, ((BatchNorm) l).eps());
        } else if (l instanceof Relu) {
            return (x, s, p) -> Reference.clip(x, s, 0, Double.POSITIVE_INFINITY);
        } else if (l instanceof Relu6) {
            return (x, s, p) -> Reference.clip(x, s, 0, 6);
        } else if (l instanceof Pool2d) {
            Pool2d q = (Pool2d) l;
            return (x, s, p) -> Reference.pool(x, s, q.kernel(), q.stride(), q.isMax());
        } else if (l instanceof Flatten) {
            return (x, s, p) -> new Reference.Out(x, new int[] {s[0], x.length / s[0]});
        }
        throw new AssertionError("no reference for " + l);
    }
}
