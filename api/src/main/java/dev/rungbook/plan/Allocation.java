package dev.rungbook.plan;

import java.util.List;
import java.util.Locale;
import tech.tablesaw.api.DoubleColumn;
import tech.tablesaw.api.LongColumn;
import tech.tablesaw.api.StringColumn;
import tech.tablesaw.api.Table;

/**
 * A chosen plan with its size, the predicted cost (the sum of the chosen cells' sensitivities), the predicted
 * accuracy (float accuracy minus the sum of the chosen cells' accuracy drops) and what the whole plan measures on the
 * data. Made by {@link BitBudget}; immutable.
 */
public final class Allocation {
    private final Plan plan;
    private final List<String> layers;
    private final List<String> candidates;
    private final long[] layerBytes;
    private final double[] layerCost;
    private final long budget;
    private final Objective objective;
    private final double predicted;
    private final double predictedAccuracy;
    private final double floatAccuracy;
    private final Outputs.Error measured;

    Allocation(Plan plan, List<String> layers, List<String> candidates, long[] layerBytes, double[] layerCost,
            long budget, Objective objective, double predictedAccuracy, double floatAccuracy,
            Outputs.Error measured) {
        this.plan = plan;
        this.layers = List.copyOf(layers);
        this.candidates = List.copyOf(candidates);
        this.layerBytes = layerBytes.clone();
        this.layerCost = layerCost.clone();
        this.budget = budget;
        this.objective = objective;
        double p = 0;
        for (double c : layerCost) {
            p += c;
        }
        this.predicted = p;
        this.predictedAccuracy = predictedAccuracy;
        this.floatAccuracy = floatAccuracy;
        this.measured = measured;
    }

    /** The plan (its {@link Plan#info()} records the budget, size and objective). */
    public Plan plan() {
        return plan;
    }

    /** The candidate label chosen per layer, in layer order. */
    public List<String> candidates() {
        return candidates;
    }

    /** The layers, in network order. */
    public List<String> layers() {
        return layers;
    }

    /** The bytes of all quantized weights (codes, scales, zero points), as {@code Quantized.bytes()} summed. */
    public long bytes() {
        return sum(layerBytes);
    }

    /** The byte budget the plan was chosen for; -1 for a uniform baseline. */
    public long budget() {
        return budget;
    }

    /** The objective the plan minimises. */
    public Objective objective() {
        return objective;
    }

    /** The sum of the chosen cells' sensitivities under {@link #objective()}. */
    public double predicted() {
        return predicted;
    }

    /** Float accuracy minus the sum of the chosen cells' accuracy drops; NaN without labels. */
    public double predictedAccuracy() {
        return predictedAccuracy;
    }

    /** The float network's accuracy; NaN without labels. */
    public double floatAccuracy() {
        return floatAccuracy;
    }

    /** The measured accuracy of the whole plan; NaN without labels. */
    public double measuredAccuracy() {
        return measured.accuracy();
    }

    /** The measured share of samples whose top class equals the float network's. */
    public double measuredAgreement() {
        return measured.agreement();
    }

    /** The measured mean KL divergence of the plan's softmax from the float network's, nats. */
    public double measuredKlDivergence() {
        return measured.klDivergence();
    }

    /** The measured mean squared logit difference. */
    public double measuredLogitMse() {
        return measured.logitMse();
    }

    /** The measured value of {@link #objective()} for the whole plan (comparable with {@link #predicted()}). */
    public double measured() {
        switch (objective) {
            case KL_DIVERGENCE:
                return measured.klDivergence();
            case LOGIT_MSE:
                return measured.logitMse();
            default:
                return floatAccuracy - measured.accuracy();
        }
    }

    /** One row per layer: {@code layer, candidate, spec, bytes} and the chosen cell's sensitivity. */
    public Table table() {
        StringColumn layer = StringColumn.create("layer");
        StringColumn cand = StringColumn.create("candidate");
        StringColumn spec = StringColumn.create("spec");
        LongColumn bytes = LongColumn.create("bytes");
        DoubleColumn cost = DoubleColumn.create(objective.column());
        for (int i = 0; i < layers.size(); i++) {
            layer.append(layers.get(i));
            cand.append(candidates.get(i));
            spec.append(plan.spec(layers.get(i)).label());
            bytes.append(layerBytes[i]);
            cost.append(layerCost[i]);
        }
        return Table.create("allocation", layer, cand, spec, bytes, cost);
    }

    private static long sum(long[] v) {
        long s = 0;
        for (long x : v) {
            s += x;
        }
        return s;
    }

    /** A short summary, for example {@code Allocation 31,232 of 36,000 bytes [int4, int8, int8]: accuracy ...}. */
    @Override
    public String toString() {
        return String.format(Locale.ROOT, "Allocation %,d%s bytes %s: predicted %s %.4g (measured %.4g), accuracy "
                + "predicted %.4f, measured %.4f (float %.4f), top-1 agreement %.4f", bytes(),
                budget < 0 ? "" : String.format(Locale.ROOT, " of %,d", budget), candidates, objective.column(),
                predicted, measured(), predictedAccuracy, measuredAccuracy(), floatAccuracy, measuredAgreement());
    }
}
