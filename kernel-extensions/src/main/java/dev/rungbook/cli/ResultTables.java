package dev.rungbook.cli;

import dev.rungbook.chart.Charts;
import dev.rungbook.study.StudyResult;
import java.util.ArrayList;
import java.util.LinkedHashMap;
import java.util.List;
import java.util.Map;
import org.knowm.xchart.internal.chartpart.IChart;
import tech.tablesaw.api.DoubleColumn;
import tech.tablesaw.api.IntColumn;
import tech.tablesaw.api.LongColumn;
import tech.tablesaw.api.NumericColumn;
import tech.tablesaw.api.StringColumn;
import tech.tablesaw.api.Table;

/** Summaries and charts of per-tensor result tables (the columns of {@link StudyResult#COLUMNS}). */
final class ResultTables {
    /** At most this many tensors appear in a heat map. */
    static final int HEAT_MAP_ROWS = 60;

    private ResultTables() {
    }

    /**
     * One row per spec (in order of first appearance): {@code #} (1, 2, ...), {@code spec, tensors, elements, bits_per_weight} (weighted by
     * elements), {@code bytes} (sum), {@code mse} (weighted by elements), {@code sqnr_db_mean} (mean over tensors of
     * the finite values) and {@code sqnr_db_min} (the worst tensor).
     */
    static Table summary(Table rows) {
        Map<String, double[]> acc = new LinkedHashMap<>();
        StringColumn spec = rows.stringColumn(StudyResult.SPEC);
        NumericColumn<?> elements = rows.numberColumn(StudyResult.ELEMENTS);
        NumericColumn<?> bpw = rows.numberColumn(StudyResult.BITS_PER_WEIGHT);
        NumericColumn<?> bytes = rows.numberColumn(StudyResult.BYTES);
        NumericColumn<?> mse = rows.numberColumn("mse");
        NumericColumn<?> sqnr = rows.numberColumn("sqnr_db");
        for (int r = 0; r < rows.rowCount(); r++) {
            // tensors, elements, bits, bytes, squared error, sqnr sum, finite sqnr count, sqnr min
            double[] a = acc.computeIfAbsent(spec.get(r), k -> new double[] {0, 0, 0, 0, 0, 0, 0,
                Double.POSITIVE_INFINITY});
            double n = elements.getDouble(r);
            a[0]++;
            a[1] += n;
            a[2] += bpw.getDouble(r) * n;
            a[3] += bytes.getDouble(r);
            a[4] += mse.getDouble(r) * n;
            double s = sqnr.getDouble(r);
            if (Double.isFinite(s)) {
                a[5] += s;
                a[6]++;
            }
            a[7] = Math.min(a[7], s);
        }
        IntColumn number = IntColumn.create("#");
        StringColumn sc = StringColumn.create(StudyResult.SPEC);
        IntColumn tc = IntColumn.create("tensors");
        LongColumn ec = LongColumn.create(StudyResult.ELEMENTS);
        DoubleColumn bc = DoubleColumn.create(StudyResult.BITS_PER_WEIGHT);
        LongColumn yc = LongColumn.create(StudyResult.BYTES);
        DoubleColumn mc = DoubleColumn.create("mse");
        DoubleColumn qc = DoubleColumn.create("sqnr_db_mean");
        DoubleColumn qm = DoubleColumn.create("sqnr_db_min");
        acc.forEach((k, a) -> {
            number.append(number.size() + 1);
            sc.append(k);
            tc.append((int) a[0]);
            ec.append((long) a[1]);
            bc.append(a[1] == 0 ? Double.NaN : a[2] / a[1]);
            yc.append((long) a[3]);
            mc.append(a[1] == 0 ? Double.NaN : a[4] / a[1]);
            qc.append(a[6] == 0 ? a[7] : a[5] / a[6]);
            qm.append(a[7]);
        });
        return Table.create("summary", number, sc, tc, ec, bc, yc, mc, qc, qm);
    }

    /** Plain-text rendering of a table with every row (for the terminal). */
    static String text(Table t) {
        List<String[]> cells = new ArrayList<>();
        String[] head = new String[t.columnCount()];
        for (int c = 0; c < head.length; c++) {
            head[c] = t.column(c).name();
        }
        cells.add(head);
        for (int r = 0; r < t.rowCount(); r++) {
            String[] row = new String[head.length];
            for (int c = 0; c < head.length; c++) {
                Object v = t.column(c).get(r);
                row[c] = v instanceof Double ? dev.rungbook.render.TableRenderer.number((Double) v) : String.valueOf(v);
            }
            cells.add(row);
        }
        int[] w = new int[head.length];
        for (String[] r : cells) {
            for (int c = 0; c < r.length; c++) {
                w[c] = Math.max(w[c], r[c].length());
            }
        }
        StringBuilder b = new StringBuilder();
        for (String[] r : cells) {
            StringBuilder line = new StringBuilder();
            for (int c = 0; c < r.length; c++) {
                boolean num = t.column(c) instanceof NumericColumn;
                String pad = " ".repeat(w[c] - r[c].length());
                line.append(c == 0 ? "" : "  ").append(num ? pad + r[c] : r[c] + pad);
            }
            b.append(line.toString().stripTrailing()).append('\n');
        }
        return b.toString();
    }

    /**
     * SQNR (dB, rounded to 0.1) of each tensor (rows, at most {@link #HEAT_MAP_ROWS}) under each spec (columns, named
     * by their row number {@code #} in the {@link #summary} when {@code numbered}, else by the spec); null if no value
     * is finite.
     */
    static IChart sqnrHeatMap(Table rows, String title, boolean numbered) {
        List<String> tensors = new ArrayList<>();
        List<String> specs = new ArrayList<>();
        StringColumn tc = rows.stringColumn(StudyResult.TENSOR);
        StringColumn sc = rows.stringColumn(StudyResult.SPEC);
        for (int r = 0; r < rows.rowCount(); r++) {
            if (!tensors.contains(tc.get(r)) && tensors.size() < HEAT_MAP_ROWS) {
                tensors.add(tc.get(r));
            }
            if (!specs.contains(sc.get(r))) {
                specs.add(sc.get(r));
            }
        }
        double[][] v = new double[tensors.size()][specs.size()];
        for (double[] row : v) {
            java.util.Arrays.fill(row, Double.NaN);
        }
        NumericColumn<?> sqnr = rows.numberColumn("sqnr_db");
        boolean any = false;
        for (int r = 0; r < rows.rowCount(); r++) {
            int i = tensors.indexOf(tc.get(r));
            double s = sqnr.getDouble(r);
            if (i >= 0 && Double.isFinite(s)) {
                v[i][specs.indexOf(sc.get(r))] = Math.round(s * 10) / 10.0;
                any = true;
            }
        }
        List<String> cols = specs;
        if (numbered) {
            cols = new ArrayList<>();
            for (int k = 1; k <= specs.size(); k++) {
                cols.add(Integer.toString(k));
            }
        }
        return any ? Charts.heatMap(title, "tensor", numbered ? "spec (# of the summary)" : "spec", tensors, cols, v)
                : null;
    }

    /** Mean SQNR versus bits per weight, one point per spec of a {@link #summary} table; null if nothing is finite. */
    static IChart sqnrVsBits(Table summary) {
        NumericColumn<?> q = summary.numberColumn("sqnr_db_mean");
        for (int r = 0; r < summary.rowCount(); r++) {
            if (Double.isFinite(q.getDouble(r))) {
                Table finite = summary.where(summary.doubleColumn("sqnr_db_mean").isBetweenInclusive(-Double.MAX_VALUE,
                        Double.MAX_VALUE));
                return Charts.errorVsBits(finite, StudyResult.BITS_PER_WEIGHT, "sqnr_db_mean", StudyResult.SPEC, false);
            }
        }
        return null;
    }
}
