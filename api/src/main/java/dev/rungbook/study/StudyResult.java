package dev.rungbook.study;

import dev.rungbook.metrics.ErrorReport;
import java.util.ArrayList;
import java.util.List;
import tech.tablesaw.api.DoubleColumn;
import tech.tablesaw.api.IntColumn;
import tech.tablesaw.api.LongColumn;
import tech.tablesaw.api.StringColumn;
import tech.tablesaw.api.Table;

/**
 * The outcome of {@link Study#compare}: one row per (tensor, spec) pair. Column names are stable (constants below)
 * so that charts and notebooks can rely on them. Immutable.
 */
public final class StudyResult {
    /** Tensor name (string). */
    public static final String TENSOR = "tensor";
    /** Spec label, {@link dev.rungbook.quant.Quantizer#label()} (string). */
    public static final String SPEC = "spec";
    /** Number of elements of the tensor (int). */
    public static final String ELEMENTS = "elements";
    /** Bits per weight including scale and zero-point overhead (double). */
    public static final String BITS_PER_WEIGHT = "bits_per_weight";
    /** Bytes of codes and side information (long). */
    public static final String BYTES = "bytes";

    /**
     * All column names in order: {@code tensor, spec, elements, bits_per_weight, bytes}, then the metrics of
     * {@link ErrorReport#METRICS} ({@code mse, rmse, mae, max_abs_error, sqnr_db, cosine, frobenius, rel_frobenius,
     * kl_divergence}), all double.
     */
    public static final List<String> COLUMNS;

    static {
        List<String> c = new ArrayList<>(List.of(TENSOR, SPEC, ELEMENTS, BITS_PER_WEIGHT, BYTES));
        c.addAll(ErrorReport.METRICS);
        COLUMNS = List.copyOf(c);
    }

    /** One (tensor, spec) outcome. */
    record Row(String tensor, String spec, int elements, double bitsPerWeight, long bytes, double[] metrics) {
    }

    private final List<Row> rows;

    StudyResult(List<Row> rows) {
        this.rows = List.copyOf(rows);
    }

    /** The number of rows. */
    public int rowCount() {
        return rows.size();
    }

    /** A new table with the columns {@link #COLUMNS}, one row per (tensor, spec) in study order. */
    public Table table() {
        StringColumn tensor = StringColumn.create(TENSOR);
        StringColumn spec = StringColumn.create(SPEC);
        IntColumn elements = IntColumn.create(ELEMENTS);
        DoubleColumn bpw = DoubleColumn.create(BITS_PER_WEIGHT);
        LongColumn bytes = LongColumn.create(BYTES);
        List<DoubleColumn> metrics = new ArrayList<>();
        for (String m : ErrorReport.METRICS) {
            metrics.add(DoubleColumn.create(m));
        }
        for (Row r : rows) {
            tensor.append(r.tensor());
            spec.append(r.spec());
            elements.append(r.elements());
            bpw.append(r.bitsPerWeight());
            bytes.append(r.bytes());
            for (int k = 0; k < metrics.size(); k++) {
                metrics.get(k).append(r.metrics()[k]);
            }
        }
        Table t = Table.create("study", tensor, spec, elements, bpw, bytes);
        for (DoubleColumn c : metrics) {
            t.addColumns(c);
        }
        return t;
    }

    @Override
    public String toString() {
        return table().print();
    }
}
