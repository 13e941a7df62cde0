package dev.rungbook.plan;

import dev.rungbook.chart.Charts;
import dev.rungbook.nn.Network;
import java.util.ArrayList;
import java.util.List;
import java.util.Objects;
import org.knowm.xchart.HeatMapChart;
import tech.tablesaw.api.DoubleColumn;
import tech.tablesaw.api.IntColumn;
import tech.tablesaw.api.LongColumn;
import tech.tablesaw.api.StringColumn;
import tech.tablesaw.api.Table;

/**
 * The outcome of {@link Sensitivity#measure()}: for each weighted layer and candidate, the bytes of the quantized
 * weight and the network's output error with only that layer quantized. Column names are stable (constants below).
 * Immutable; it keeps the network and the data so that {@link BitBudget} can measure whole plans.
 */
public final class SensitivityResult {
    /** Layer name (string). */
    public static final String LAYER = "layer";
    /** Candidate label (string). */
    public static final String CANDIDATE = "candidate";
    /** The candidate's spec label (string). */
    public static final String SPEC = "spec";
    /** Elements of the layer's weight (int). */
    public static final String ELEMENTS = "elements";
    /** Bytes of the quantized weight: bit-packed codes plus scales and zero points, as {@code Quantized.bytes()}. */
    public static final String BYTES = "bytes";
    /** Bits per weight including the side information (double). */
    public static final String BITS_PER_WEIGHT = "bits_per_weight";
    /** SQNR of the quantized weight itself in dB (double). */
    public static final String WEIGHT_SQNR_DB = "weight_sqnr_db";
    /** Mean squared logit difference against the float network (double). */
    public static final String LOGIT_MSE = "logit_mse";
    /** Mean KL divergence of the softmax outputs from the float network's, nats (double). */
    public static final String KL_DIVERGENCE = "kl_divergence";
    /** Share of samples whose top class equals the float network's (double). */
    public static final String TOP1_AGREEMENT = "top1_agreement";
    /** Accuracy on the labels (double; missing without labels). */
    public static final String ACCURACY = "accuracy";
    /** Float accuracy minus {@link #ACCURACY} (double; missing without labels). */
    public static final String ACCURACY_DROP = "accuracy_drop";
    /** Why a candidate does not fit a layer; empty when it does (string). */
    public static final String NOTE = "note";

    /** All column names in order. */
    public static final List<String> COLUMNS = List.of(LAYER, CANDIDATE, SPEC, ELEMENTS, BYTES, BITS_PER_WEIGHT,
            WEIGHT_SQNR_DB, LOGIT_MSE, KL_DIVERGENCE, TOP1_AGREEMENT, ACCURACY, ACCURACY_DROP, NOTE);

    /** One (layer, candidate) outcome; {@code note} is null when the candidate fits. */
    record Cell(long bytes, double bitsPerWeight, double weightSqnrDb, double logitMse, double klDivergence,
            double agreement, double accuracy, String note) {
        static Cell notApplicable(String why) {
            return new Cell(-1, Double.NaN, Double.NaN, Double.NaN, Double.NaN, Double.NaN, Double.NaN,
                    why == null || why.isBlank() ? "does not fit" : why);
        }

        boolean applicable() {
            return note == null;
        }
    }

    private final Network network;
    private final Outputs reference;
    private final List<String> layers;
    private final int[] elements;
    private final List<Candidate> candidates;
    private final Cell[][] cells;
    /** Measured output errors of whole plans, by their choice of candidate per layer (plans are re-measured often). */
    private final java.util.Map<String, Outputs.Error> measuredPlans = new java.util.concurrent.ConcurrentHashMap<>();

    SensitivityResult(Network network, Outputs reference, List<String> layers, int[] elements,
            List<Candidate> candidates, List<Cell[]> rows) {
        this.network = network;
        this.reference = reference;
        this.layers = List.copyOf(layers);
        this.elements = elements.clone();
        this.candidates = List.copyOf(candidates);
        this.cells = rows.toArray(new Cell[0][]);
    }

    /** The network that was measured. */
    public Network network() {
        return network;
    }

    /**
     * The output error of the network with layer {@code i} quantized by candidate {@code choices[i]}, measured once
     * per distinct choice and then remembered; {@code plan} must be that choice.
     */
    Outputs.Error measure(int[] choices, Plan plan) {
        return measuredPlans.computeIfAbsent(java.util.Arrays.toString(choices), k -> reference.of(plan.apply(network)));
    }

    Outputs reference() {
        return reference;
    }

    /** The weighted layers' names, in network order (the rows of the heat map). */
    public List<String> layers() {
        return layers;
    }

    /** The candidates, in order (the columns of the heat map). */
    public List<Candidate> candidates() {
        return candidates;
    }

    /** Whether the data had labels (then accuracy columns are filled). */
    public boolean hasLabels() {
        return reference.hasLabels();
    }

    /** The float network's accuracy on the data (NaN without labels). */
    public double floatAccuracy() {
        return reference.referenceAccuracy();
    }

    /** Whether candidate {@code candidate} fits layer {@code layer} (indices into {@link #layers()} and {@link #candidates()}). */
    public boolean applicable(int layer, int candidate) {
        return cells[layer][candidate].applicable();
    }

    /** The bytes of layer {@code layer}'s weight under candidate {@code candidate}, -1 when it does not fit. */
    public long bytes(int layer, int candidate) {
        return cells[layer][candidate].bytes();
    }

    /** Elements of layer {@code layer}'s weight. */
    public int elements(int layer) {
        return elements[layer];
    }

    /**
     * The sensitivity of layer {@code layer} to candidate {@code candidate} under {@code objective}; NaN when the
     * candidate does not fit.
     *
     * @throws IllegalArgumentException for {@link Objective#ACCURACY_DROP} without labels
     */
    public double value(Objective objective, int layer, int candidate) {
        Cell c = cells[layer][candidate];
        switch (objective) {
            case KL_DIVERGENCE:
                return c.klDivergence();
            case LOGIT_MSE:
                return c.logitMse();
            default:
                if (!hasLabels()) {
                    throw new IllegalArgumentException("the accuracy-drop objective needs labelled data; this "
                            + "sensitivity was measured on calibration inputs without labels");
                }
                return c.applicable() ? floatAccuracy() - c.accuracy() : Double.NaN;
        }
    }

    /** The number of (layer, candidate) rows. */
    public int rowCount() {
        return layers.size() * candidates.size();
    }

    /** A new table with the columns {@link #COLUMNS}, layer-major; a candidate that does not fit has missing values. */
    public Table table() {
        StringColumn layer = StringColumn.create(LAYER);
        StringColumn cand = StringColumn.create(CANDIDATE);
        StringColumn spec = StringColumn.create(SPEC);
        IntColumn elem = IntColumn.create(ELEMENTS);
        LongColumn bytes = LongColumn.create(BYTES);
        DoubleColumn bpw = DoubleColumn.create(BITS_PER_WEIGHT);
        DoubleColumn sqnr = DoubleColumn.create(WEIGHT_SQNR_DB);
        DoubleColumn mse = DoubleColumn.create(LOGIT_MSE);
        DoubleColumn kl = DoubleColumn.create(KL_DIVERGENCE);
        DoubleColumn agree = DoubleColumn.create(TOP1_AGREEMENT);
        DoubleColumn acc = DoubleColumn.create(ACCURACY);
        DoubleColumn drop = DoubleColumn.create(ACCURACY_DROP);
        StringColumn note = StringColumn.create(NOTE);
        for (int i = 0; i < layers.size(); i++) {
            for (int k = 0; k < candidates.size(); k++) {
                Cell c = cells[i][k];
                layer.append(layers.get(i));
                cand.append(candidates.get(k).label());
                spec.append(candidates.get(k).spec().label());
                elem.append(elements[i]);
                if (c.applicable()) {
                    bytes.append(c.bytes());
                } else {
                    bytes.appendMissing();
                }
                bpw.append(c.bitsPerWeight());
                sqnr.append(c.weightSqnrDb());
                mse.append(c.logitMse());
                kl.append(c.klDivergence());
                agree.append(c.agreement());
                acc.append(c.accuracy());
                drop.append(c.applicable() && hasLabels() ? floatAccuracy() - c.accuracy() : Double.NaN);
                note.append(c.applicable() ? "" : c.note());
            }
        }
        return Table.create("sensitivity", layer, cand, spec, elem, bytes, bpw, sqnr, mse, kl, agree, acc, drop,
                note);
    }

    /** The heat map of the KL divergence, layers (rows) by candidates (columns). */
    public HeatMapChart heatMap() {
        return heatMap(Objective.KL_DIVERGENCE);
    }

    /**
     * The heat map of {@code objective}, layers (rows, network order) by candidates (columns); candidates that do not
     * fit a layer are blank.
     */
    public HeatMapChart heatMap(Objective objective) {
        Objects.requireNonNull(objective, "objective");
        double[][] v = new double[layers.size()][candidates.size()];
        for (int i = 0; i < layers.size(); i++) {
            for (int k = 0; k < candidates.size(); k++) {
                v[i][k] = value(objective, i, k);
            }
        }
        List<String> cols = new ArrayList<>();
        for (Candidate c : candidates) {
            cols.add(c.label());
        }
        return Charts.heatMap("Sensitivity: " + objective.column() + ", one layer quantized at a time", "layer",
                "candidate", layers, cols, v);
    }

    @Override
    public String toString() {
        return table().print();
    }
}
