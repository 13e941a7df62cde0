package dev.rungbook.plan;

import dev.rungbook.nn.Dataset;
import dev.rungbook.nn.Layer;
import dev.rungbook.nn.Network;
import dev.rungbook.nn.WeightedLayer;
import dev.rungbook.progress.Progress;
import dev.rungbook.quant.Quantized;
import dev.rungbook.tensor.Tensor;
import java.util.ArrayList;
import java.util.HashSet;
import java.util.List;
import java.util.Objects;
import java.util.Set;

/**
 * How much each weighted layer of a network suffers from each candidate quantizer, one layer at a time:
 *
 * <pre>{@code
 * SensitivityResult s = Sensitivity.of(net, validation)
 *         .candidates(Candidate.of("int8", Quantizer.linear(8)), Candidate.of("int4", Quantizer.linear(4)))
 *         .measure();
 * s.table();        // one row per (layer, candidate): bytes, output error, accuracy drop
 * s.heatMap();      // layers x candidates, KL divergence
 * }</pre>
 *
 * <p>For every weighted layer (in network order) and every candidate, the layer's weight is replaced by
 * {@code candidate.spec().apply(weight).dequantized()}, every other layer stays float, and the network's logits on
 * the data are compared with the float network's: mean squared logit difference, mean KL divergence of the softmax
 * outputs, the share of samples whose top class is unchanged, and with labels the accuracy and its drop. The input of
 * each layer is computed once and shared by its candidates. A candidate that does not fit a layer (for example a
 * group size that does not divide the layer's input width) is recorded as not applicable with the quantizer's reason.
 *
 * <p>Immutable; {@link #measure()} does the work, reporting each (layer, candidate) pair to the {@link Progress}
 * (task {@code "sensitivity"}) and stopping with an {@link dev.rungbook.progress.OperationInterruptedException} when
 * its thread is interrupted.
 */
public final class Sensitivity {
    private final Network network;
    private final Tensor inputs;
    private final int[] labels;
    private final List<Candidate> candidates;
    private final Progress progress;

    private Sensitivity(Network network, Tensor inputs, int[] labels, List<Candidate> candidates,
            Progress progress) {
        this.network = network;
        this.inputs = inputs;
        this.labels = labels;
        this.candidates = candidates;
        this.progress = progress;
    }

    /**
     * Sensitivity measured on labelled data (adds accuracy and accuracy drop), with {@link Candidate#defaults()}.
     *
     * @throws IllegalArgumentException if the network has no weighted layer or the data set is empty
     */
    public static Sensitivity of(Network network, Dataset data) {
        Objects.requireNonNull(data, "data");
        return make(network, data.inputs(), data.labels());
    }

    /**
     * Sensitivity measured on unlabelled calibration inputs shaped {@code [N, ...]}, with
     * {@link Candidate#defaults()}.
     *
     * @throws IllegalArgumentException if the network has no weighted layer or there are no samples
     */
    public static Sensitivity of(Network network, Tensor calibration) {
        Objects.requireNonNull(calibration, "calibration");
        return make(network, calibration, null);
    }

    private static Sensitivity make(Network network, Tensor inputs, int[] labels) {
        Objects.requireNonNull(network, "network");
        if (network.weightedLayers().isEmpty()) {
            throw new IllegalArgumentException("sensitivity: the network has no weighted layer");
        }
        if (inputs.rank() < 1 || inputs.dim(0) == 0) {
            throw new IllegalArgumentException("sensitivity: no samples in the data");
        }
        Set<String> names = new HashSet<>();
        for (WeightedLayer l : network.weightedLayers()) {
            if (!names.add(l.name())) {
                throw new IllegalArgumentException("sensitivity: two weighted layers are named '" + l.name()
                        + "'; a plan names layers, so they must differ");
            }
        }
        return new Sensitivity(network, inputs, labels, Candidate.defaults(), Progress.silent());
    }

    /**
     * The same measurement over these candidates, in this order (the columns of the heat map).
     *
     * @throws IllegalArgumentException if there are none or two share a label
     */
    public Sensitivity candidates(List<Candidate> list) {
        if (list.isEmpty()) {
            throw new IllegalArgumentException("sensitivity needs at least one candidate");
        }
        Set<String> labelsSeen = new HashSet<>();
        for (Candidate c : list) {
            Objects.requireNonNull(c, "candidate");
            if (!labelsSeen.add(c.label())) {
                throw new IllegalArgumentException("two candidates are labelled '" + c.label() + "'");
            }
        }
        return new Sensitivity(network, inputs, labels, List.copyOf(list), progress);
    }

    /** As {@link #candidates(List)}. */
    public Sensitivity candidates(Candidate... list) {
        return candidates(List.of(list));
    }

    /** The same measurement reporting to {@code listener}. */
    public Sensitivity progress(Progress listener) {
        return new Sensitivity(network, inputs, labels, candidates, Objects.requireNonNull(listener, "listener"));
    }

    /** The candidates, in order. */
    public List<Candidate> candidates() {
        return candidates;
    }

    /**
     * Quantizes each weighted layer alone with each candidate and measures the network's output error.
     *
     * @throws IllegalArgumentException if some layer fits no candidate (the message gives each candidate's reason)
     */
    public SensitivityResult measure() {
        Outputs reference = new Outputs(network, inputs, labels);
        List<Layer> layers = network.layers();
        List<WeightedLayer> weighted = network.weightedLayers();
        int c = candidates.size();
        List<SensitivityResult.Cell[]> rows = new ArrayList<>();
        long total = (long) weighted.size() * c;
        long done = 0;
        Tensor x = inputs;
        for (int li = 0; li < layers.size(); li++) {
            Layer layer = layers.get(li);
            if (layer instanceof WeightedLayer) {
                WeightedLayer w = (WeightedLayer) layer;
                SensitivityResult.Cell[] row = new SensitivityResult.Cell[c];
                for (int k = 0; k < c; k++) {
                    Progress.checkInterrupted("sensitivity");
                    Candidate cand = candidates.get(k);
                    Quantized q;
                    try {
                        q = cand.spec().apply(w.weight().withName(w.name() + ".weight"));
                    } catch (IllegalArgumentException e) {
                        row[k] = SensitivityResult.Cell.notApplicable(e.getMessage());
                        progress.update("sensitivity", ++done, total, Double.NaN);
                        continue;
                    }
                    Tensor y = w.withWeight(q.dequantized()).forward(x);
                    for (int rest = li + 1; rest < layers.size(); rest++) {
                        y = layers.get(rest).forward(y);
                    }
                    Outputs.Error e = reference.of(y);
                    row[k] = new SensitivityResult.Cell(q.bytes(), q.bitsPerWeight(), q.error().sqnrDb(),
                            e.logitMse(), e.klDivergence(), e.agreement(), e.accuracy(), null);
                    progress.update("sensitivity", ++done, total, e.klDivergence());
                }
                boolean any = false;
                StringBuilder why = new StringBuilder();
                for (int k = 0; k < c; k++) {
                    any |= row[k].applicable();
                    if (!row[k].applicable()) {
                        why.append("\n  ").append(candidates.get(k).label()).append(": ").append(row[k].note());
                    }
                }
                if (!any) {
                    throw new IllegalArgumentException("sensitivity: no candidate fits layer '" + w.name() + "':"
                            + why);
                }
                rows.add(row);
            }
            x = layer.forward(x);
        }
        progress.finish("sensitivity");
        List<String> names = new ArrayList<>();
        int[] elements = new int[weighted.size()];
        for (int i = 0; i < weighted.size(); i++) {
            names.add(weighted.get(i).name());
            elements[i] = weighted.get(i).weight().size();
        }
        return new SensitivityResult(network, reference, names, elements, candidates, rows);
    }
}
