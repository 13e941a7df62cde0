package dev.rungbook.chart;

import dev.rungbook.metrics.Histogram;
import dev.rungbook.metrics.TensorStats;
import dev.rungbook.tensor.Tensor;
import java.awt.BasicStroke;
import java.awt.Color;
import java.awt.Graphics2D;
import java.awt.RenderingHints;
import java.awt.geom.Line2D;
import java.awt.image.BufferedImage;
import java.io.ByteArrayOutputStream;
import java.io.IOException;
import java.io.UncheckedIOException;
import java.nio.charset.StandardCharsets;
import java.nio.file.Path;
import java.util.ArrayList;
import java.util.Arrays;
import java.util.Comparator;
import java.util.LinkedHashMap;
import java.util.List;
import java.util.Locale;
import java.util.Map;
import java.util.Objects;
import java.util.TreeSet;
import javax.imageio.ImageIO;
import org.knowm.xchart.AnnotationText;
import org.knowm.xchart.HeatMapChart;
import org.knowm.xchart.HeatMapChartBuilder;
import org.knowm.xchart.VectorGraphicsEncoder;
import org.knowm.xchart.XYChart;
import org.knowm.xchart.XYChartBuilder;
import org.knowm.xchart.XYSeries;
import org.knowm.xchart.XYSeries.XYSeriesRenderStyle;
import org.knowm.xchart.internal.chartpart.IChart;
import org.knowm.xchart.style.Styler;
import org.knowm.xchart.style.markers.Marker;
import org.knowm.xchart.style.markers.SeriesMarkers;
import tech.tablesaw.api.NumericColumn;
import tech.tablesaw.api.Table;
import tech.tablesaw.columns.Column;

/**
 * Chart factories for quantization experiments, and headless PNG/SVG output.
 *
 * <p>Every factory returns a plain XChart chart ({@link XYChart} or {@link HeatMapChart}) of {@value #WIDTH} x
 * {@value #HEIGHT} pixels, styled in one shared way (white background, no borders, light grid, colour-blind-safe
 * palette), so a notebook kernel can render it and user code can still adjust it with XChart's own API.
 *
 * <p>Output is headless: loading this class sets {@code java.awt.headless=true} unless the property is already set.
 * {@link #savePng} and {@link #saveSvg} draw the whole image in memory first and then write it atomically (a temporary
 * file in the target folder, renamed over the target), so a chart that fails to draw or a failed write leaves an
 * existing file untouched.
 */
public final class Charts {
    /** Default chart width in pixels. */
    public static final int WIDTH = 600;
    /** Default chart height in pixels. */
    public static final int HEIGHT = 400;
    /**
     * Up to this many grid levels are marked as dashed vertical lines across a histogram; more are shown as a strip
     * of short ticks along the bottom, which stays readable for int8 grids (256 levels).
     */
    public static final int MAX_LINE_LEVELS = 64;
    /** The bottom of a logarithmic count axis; empty bins are drawn there (real counts are at least 1). */
    public static final double LOG_FLOOR = 0.5;
    /** The largest PNG scale factor accepted. */
    public static final int MAX_SCALE = 8;
    /** Series with at most this many points get markers; longer ones are drawn as plain lines. */
    static final int MAX_MARKED_POINTS = 64;

    private static final String GRID_LEVELS = "grid levels";
    /** The name of an invisible one-point series that fixes XChart's tick placement on histograms. */
    static final String SPACER = "(tick spacer)";

    static {
        if (System.getProperty("java.awt.headless") == null) {
            System.setProperty("java.awt.headless", "true");
        }
    }

    private Charts() {
    }

    // ------------------------------------------------------------------------------------------------ histograms

    /** The histogram of a tensor's finite values in {@link TensorStats#DEFAULT_BINS} bins, linear count axis. */
    public static XYChart histogram(Tensor t) {
        return histogram(t, TensorStats.DEFAULT_BINS, false);
    }

    /** As {@link #histogram(Tensor)} with a logarithmic count axis (empty bins drop to the axis floor). */
    public static XYChart histogramLog(Tensor t) {
        return histogram(t, TensorStats.DEFAULT_BINS, true);
    }

    /**
     * The histogram of a tensor's finite values in {@code bins} equal bins over [min, max], drawn as a filled step
     * outline. The series' y values are the bin counts (bin i is drawn from edge i to edge i + 1; the series repeats
     * the last count at the last edge). With {@code logY} the count axis is logarithmic, starting at
     * {@value #LOG_FLOOR}, and empty bins are drawn at that floor: the series holds {@value #LOG_FLOOR} for them,
     * below every real count (the smallest is 1).
     *
     * @throws IllegalArgumentException if {@code bins} is not in [1, {@link Histogram#MAX_BINS}]
     */
    public static XYChart histogram(Tensor t, int bins, boolean logY) {
        Histogram h = TensorStats.of(t).histogram(bins);
        return histogram(h, "Values of " + display(t), logY);
    }

    /** A chart of an existing histogram (see {@link #histogram(Tensor, int, boolean)} for how it is drawn). */
    public static XYChart histogram(Histogram h, String title, boolean logY) {
        XYChart c = xy(title, "value", logY ? "count (log scale)" : "count");
        addHistogram(c, "values (n=" + h.total() + ")", h, logY, !logY, ChartStyle.BLUE);
        finishHistogram(c, logY, h.maxCount(), h);
        return c;
    }

    /**
     * Before and after histograms on one shared set of bins ({@link TensorStats#DEFAULT_BINS} bins over the range
     * of both tensors), without grid levels.
     */
    public static XYChart histogram(Tensor before, Tensor after) {
        return histogram(before, after, null, TensorStats.DEFAULT_BINS, false);
    }

    /**
     * Before and after histograms on one shared set of bins, with the quantization grid's levels marked: as dashed
     * vertical lines when there are at most {@value #MAX_LINE_LEVELS} levels, else as a strip of ticks along the
     * bottom. Typical use: {@code histogram(w, quantized.dequantized(), levels)}.
     */
    public static XYChart histogram(Tensor before, Tensor after, float[] gridLevels) {
        return histogram(before, after, gridLevels, TensorStats.DEFAULT_BINS, false);
    }

    /** As {@link #histogram(Tensor, Tensor, float[])} with a logarithmic count axis (empty bins at the floor). */
    public static XYChart histogramLog(Tensor before, Tensor after, float[] gridLevels) {
        return histogram(before, after, gridLevels, TensorStats.DEFAULT_BINS, true);
    }

    /**
     * Before and after histograms in {@code bins} shared bins over the union of both tensors' finite ranges and the
     * finite grid levels. "before" is a filled outline, "after" a line on top. {@code gridLevels} may be
     * {@code null} (no marks); NaN and infinite levels are ignored, duplicates are marked once.
     *
     * @throws IllegalArgumentException if {@code bins} is not in [1, {@link Histogram#MAX_BINS}]
     */
    public static XYChart histogram(Tensor before, Tensor after, float[] gridLevels, int bins, boolean logY) {
        Objects.requireNonNull(before, "before");
        Objects.requireNonNull(after, "after");
        TensorStats sb = TensorStats.of(before);
        TensorStats sa = TensorStats.of(after);
        double[] levels = distinctFinite(gridLevels);
        double lo = Double.POSITIVE_INFINITY;
        double hi = Double.NEGATIVE_INFINITY;
        for (TensorStats s : List.of(sb, sa)) {
            if (s.count() > 0) {
                lo = Math.min(lo, s.min());
                hi = Math.max(hi, s.max());
            }
        }
        if (levels.length > 0) {
            lo = Math.min(lo, levels[0]);
            hi = Math.max(hi, levels[levels.length - 1]);
        }
        double[] range = widen(lo, hi);
        Histogram hb = Histogram.of(before, bins, range[0], range[1]);
        Histogram ha = Histogram.of(after, bins, range[0], range[1]);
        boolean sameName = before.name() != null && before.name().equals(after.name());
        String title = sameName ? "Values of " + before.name() + ", before and after" : "Values before and after";
        XYChart c = xy(title, "value", logY ? "count (log scale)" : "count");
        addHistogram(c, sameName ? "before" : "before: " + display(before), hb, logY, !logY, ChartStyle.BLUE);
        addHistogram(c, sameName ? "after" : "after: " + display(after), ha, logY, false, ChartStyle.VERMILLION);
        long top = Math.max(hb.maxCount(), ha.maxCount());
        finishHistogram(c, logY, top, hb);
        if (levels.length > 0) {
            markLevels(c, levels, logY ? LOG_FLOOR : 0, Math.max(1, top), logY);
        }
        return c;
    }

    private static double[] widen(double lo, double hi) {
        if (lo > hi) {
            return new double[] {0, 1};
        }
        if (lo == hi) {
            double h = Math.max(Math.abs(lo) / 1024, Float.MIN_NORMAL);
            return new double[] {lo - h, hi + h};
        }
        return new double[] {lo, hi};
    }

    private static double[] distinctFinite(float[] levels) {
        if (levels == null) {
            return new double[0];
        }
        TreeSet<Double> set = new TreeSet<>();
        for (float f : levels) {
            if (Float.isFinite(f)) {
                set.add((double) f);
            }
        }
        return set.stream().mapToDouble(Double::doubleValue).toArray();
    }

    /**
     * Adds a histogram as a step outline, filled when {@code filled}. Log charts are never filled: XChart closes
     * areas at 1 on a log axis, which would cut the floor-level empty bins out of the fill.
     */
    private static void addHistogram(XYChart c, String name, Histogram h, boolean logY, boolean filled,
            Color color) {
        int bins = h.bins();
        double[] x = h.edges();
        double[] y = new double[bins + 1];
        for (int i = 0; i < bins; i++) {
            long n = h.count(i);
            y[i] = logY && n == 0 ? LOG_FLOOR : n;
        }
        y[bins] = y[bins - 1];
        XYSeries s = c.addSeries(name, x, y);
        s.setXYSeriesRenderStyle(filled ? XYSeriesRenderStyle.StepArea : XYSeriesRenderStyle.Step);
        s.setMarker(SeriesMarkers.NONE);
        s.setLineColor(color);
        s.setLineStyle(ChartStyle.solid(filled ? 1f : 1.6f));
        if (filled) {
            s.setFillColor(ChartStyle.translucent(color, 70));
        }
    }

    private static void finishHistogram(XYChart c, boolean logY, long top, Histogram h) {
        // XChart puts one tick on every x value when all x values are evenly spaced (as bin edges are), which gives
        // crowded, odd labels. One invisible point off the even spacing restores its usual round-number ticks.
        XYSeries spacer = c.addSeries(SPACER, new double[] {h.lo() + (h.hi() - h.lo()) / Math.PI},
                new double[] {logY ? 1 : 0});
        spacer.setXYSeriesRenderStyle(XYSeriesRenderStyle.Scatter);
        spacer.setMarker(SeriesMarkers.NONE);
        spacer.setShowInLegend(false);
        if (logY) {
            c.getStyler().setYAxisLogarithmic(true);
            c.getStyler().setYAxisLogarithmicDecadeOnly(true);
            c.getStyler().setYAxisMin(LOG_FLOOR);
            c.getStyler().setYAxisMax(Math.max(2.0, top * 1.5));
        } else {
            c.getStyler().setYAxisMin(0.0);
            c.getStyler().setYAxisMax(Math.max(1.0, top * 1.05));
        }
    }

    private static void markLevels(XYChart c, double[] levels, double base, double top, boolean logY) {
        String label = GRID_LEVELS + " (" + levels.length + ")";
        if (levels.length <= MAX_LINE_LEVELS) {
            for (int i = 0; i < levels.length; i++) {
                XYSeries s = c.addSeries(i == 0 ? label : GRID_LEVELS + " #" + i, new double[] {levels[i], levels[i]},
                        new double[] {base, logY ? top * 1.5 : top * 1.05});
                s.setXYSeriesRenderStyle(XYSeriesRenderStyle.Line);
                s.setMarker(SeriesMarkers.NONE);
                s.setLineColor(ChartStyle.MUTED);
                s.setLineStyle(ChartStyle.dashed(0.8f));
                s.setShowInLegend(i == 0);
            }
        } else {
            double[] y = new double[levels.length];
            Arrays.fill(y, base);
            XYSeries s = c.addSeries(label, levels, y);
            s.setXYSeriesRenderStyle(XYSeriesRenderStyle.Scatter);
            s.setMarker(new TickMarker());
            s.setMarkerColor(ChartStyle.INK);
        }
    }

    /** A short vertical tick rising from the point: marks many grid levels along the bottom of a histogram. */
    static final class TickMarker extends Marker {
        @Override
        public void paint(Graphics2D g, double x, double y, int markerSize) {
            g.setStroke(new BasicStroke(0.8f));
            g.draw(new Line2D.Double(x, y, x, y - 1.5 * markerSize));
        }
    }

    // ------------------------------------------------------------------------------------------ channel ranges

    /** Per-channel minimum and maximum of {@code t} along {@code axis}, in channel order. */
    public static XYChart channelRanges(Tensor t, int axis) {
        return channelRanges(t, axis, false);
    }

    /**
     * Per-channel minimum and maximum of {@code t} along {@code axis} (finite values only), as two series "max" and
     * "min" over the channel index; with {@code sortByRange} the channels are ordered by their range (max - min),
     * widest first, and the x axis is the rank. A channel with no finite values is a gap.
     *
     * @throws IllegalArgumentException if {@code axis} is out of range for the tensor's shape
     */
    public static XYChart channelRanges(Tensor t, int axis, boolean sortByRange) {
        List<TensorStats> per = TensorStats.perChannel(t, axis);
        int n = per.size();
        if (n == 0) {
            throw new IllegalArgumentException(t.label() + ": axis " + axis + " has no channels");
        }
        Integer[] order = new Integer[n];
        for (int i = 0; i < n; i++) {
            order[i] = i;
        }
        if (sortByRange) {
            Arrays.sort(order, Comparator.comparingDouble((Integer i) -> {
                double w = per.get(i).max() - per.get(i).min();
                return Double.isNaN(w) ? Double.NEGATIVE_INFINITY : w;
            }).reversed());
        }
        double[] x = new double[n];
        double[] mins = new double[n];
        double[] maxs = new double[n];
        for (int r = 0; r < n; r++) {
            x[r] = r;
            mins[r] = per.get(order[r]).min();
            maxs[r] = per.get(order[r]).max();
        }
        XYChart c = xy("Per-channel range of " + display(t) + " (axis " + axis + ")",
                sortByRange ? "channel rank (widest range first)" : "channel", "value");
        addLine(c, "max", x, maxs, ChartStyle.BLUE);
        addLine(c, "min", x, mins, ChartStyle.ORANGE);
        c.getStyler().setLegendPosition(Styler.LegendPosition.OutsideS);
        c.getStyler().setLegendLayout(Styler.LegendLayout.Horizontal);
        integerXAxis(c, n);
        return c;
    }

    // ------------------------------------------------------------------------------------------ error vs bits

    /**
     * Error versus bits per weight with the default study column names: {@code bits_per_weight} (x),
     * {@code sqnr_db} (y) and {@code spec} (one series per distinct value).
     *
     * @see #errorVsBits(Table, String, String, String, boolean)
     */
    public static XYChart errorVsBits(Table studyTable) {
        return errorVsBits(studyTable, "bits_per_weight", "sqnr_db", "spec", false);
    }

    /** As {@link #errorVsBits(Table, String, String, String, boolean)} with a linear error axis. */
    public static XYChart errorVsBits(Table t, String bitsColumn, String errorColumn, String seriesColumn) {
        return errorVsBits(t, bitsColumn, errorColumn, seriesColumn, false);
    }

    /**
     * An error metric versus bits per weight, one series per distinct value of {@code seriesColumn} (in order of
     * first appearance), points sorted by bits. {@code bitsColumn} and {@code errorColumn} must be numeric;
     * {@code seriesColumn} may be of any type (its text form names the series). Rows with a missing bits or error
     * value are skipped. Series are lines with markers, unless some series has several rows at the same bits (several
     * tensors per spec, say): then every series is drawn as points; summarise the table first to plot means.
     *
     * @param logY a logarithmic error axis (for MSE-like metrics; every plotted error must then be positive)
     * @throws IllegalArgumentException naming the table and column if a column is missing or not numeric, if no row
     *     has both values, or if {@code logY} meets a non-positive error
     */
    public static XYChart errorVsBits(Table t, String bitsColumn, String errorColumn, String seriesColumn,
            boolean logY) {
        Objects.requireNonNull(t, "table");
        NumericColumn<?> bits = numericColumn(t, bitsColumn);
        NumericColumn<?> error = numericColumn(t, errorColumn);
        Column<?> series = column(t, seriesColumn);
        Map<String, List<double[]>> points = new LinkedHashMap<>();
        for (int r = 0; r < t.rowCount(); r++) {
            if (bits.isMissing(r) || error.isMissing(r)) {
                continue;
            }
            double b = bits.getDouble(r);
            double e = error.getDouble(r);
            if (!Double.isFinite(b) || !Double.isFinite(e)) {
                continue;
            }
            if (logY && e <= 0) {
                throw new IllegalArgumentException("table '" + t.name() + "': column '" + errorColumn + "' row " + r
                        + " is " + e + ", which a logarithmic axis cannot show");
            }
            points.computeIfAbsent(series.getString(r), k -> new ArrayList<>()).add(new double[] {b, e});
        }
        if (points.isEmpty()) {
            throw new IllegalArgumentException("table '" + t.name() + "': no row has both '" + bitsColumn + "' and '"
                    + errorColumn + "'");
        }
        boolean repeated = false;
        for (List<double[]> ps : points.values()) {
            ps.sort(Comparator.comparingDouble(p -> p[0]));
            for (int i = 1; i < ps.size(); i++) {
                repeated |= ps.get(i)[0] == ps.get(i - 1)[0];
            }
        }
        XYChart c = xy(axisName(errorColumn) + " versus bits per weight", axisName(bitsColumn),
                axisName(errorColumn) + (logY ? " (log scale)" : ""));
        int k = 0;
        for (Map.Entry<String, List<double[]>> e : points.entrySet()) {
            List<double[]> ps = e.getValue();
            double[] x = ps.stream().mapToDouble(p -> p[0]).toArray();
            double[] y = ps.stream().mapToDouble(p -> p[1]).toArray();
            XYSeries s = c.addSeries(uniqueName(c, e.getKey()), x, y);
            s.setXYSeriesRenderStyle(repeated ? XYSeriesRenderStyle.Scatter : XYSeriesRenderStyle.Line);
            Color color = ChartStyle.PALETTE[k % ChartStyle.PALETTE.length];
            s.setLineColor(color);
            s.setMarkerColor(color);
            s.setLineStyle(ChartStyle.solid(1.6f));
            s.setMarker(SeriesMarkers.CIRCLE);
            k++;
        }
        c.getStyler().setYAxisLogarithmic(logY);
        c.getStyler().setLegendPosition(Styler.LegendPosition.OutsideE);
        return c;
    }

    private static String uniqueName(XYChart c, String name) {
        String base = name == null || name.isEmpty() ? "(missing)" : name;
        String n = base;
        for (int i = 2; c.getSeries(n) != null; i++) {
            n = base + " (" + i + ")";
        }
        return n;
    }

    private static String axisName(String column) {
        if (column.equals("bits_per_weight")) {
            return "bits per weight";
        }
        if (column.equals("sqnr_db")) {
            return "SQNR (dB)";
        }
        return column;
    }

    private static Column<?> column(Table t, String name) {
        Objects.requireNonNull(name, "column name");
        for (Column<?> col : t.columns()) {
            if (col.name().equals(name)) {
                return col;
            }
        }
        throw new IllegalArgumentException("table '" + t.name() + "' has no column '" + name + "'; columns are "
                + t.columnNames());
    }

    private static NumericColumn<?> numericColumn(Table t, String name) {
        Column<?> col = column(t, name);
        if (!(col instanceof NumericColumn)) {
            throw new IllegalArgumentException("table '" + t.name() + "': column '" + name + "' is "
                    + col.type().name() + ", not numeric");
        }
        return (NumericColumn<?>) col;
    }

    // ------------------------------------------------------------------------------------------------ loss curves

    /** A loss curve over steps 0, 1, 2, ... (non-finite losses are left out as gaps). */
    public static XYChart lossCurve(double[] losses) {
        return lossCurve("Loss", losses);
    }

    /** Several loss curves on one chart, named "curve 1", "curve 2", ... (one curve is named "loss"). */
    public static XYChart lossCurve(String title, double[]... curves) {
        Map<String, double[]> named = new LinkedHashMap<>();
        for (int i = 0; i < curves.length; i++) {
            named.put(curves.length == 1 ? "loss" : "curve " + (i + 1), curves[i]);
        }
        return lossCurve(title, named, false);
    }

    /**
     * Named loss curves over steps 0, 1, 2, ..., in map order (use a {@link LinkedHashMap}), for training and
     * learned-rounding runs. Non-finite values (a diverged step) are not plotted; the other points keep their
     * step numbers.
     *
     * @param logY a logarithmic loss axis (non-positive losses are then not plotted either)
     * @throws IllegalArgumentException if there are no curves or a curve has no plottable value
     */
    public static XYChart lossCurve(String title, Map<String, double[]> curves, boolean logY) {
        if (curves.isEmpty()) {
            throw new IllegalArgumentException("lossCurve '" + title + "': no curves given");
        }
        XYChart c = xy(title, "step", logY ? "loss (log scale)" : "loss");
        int longest = curves.values().stream().mapToInt(v -> v == null ? 0 : v.length).max().orElse(1);
        integerXAxis(c, longest);
        int k = 0;
        for (Map.Entry<String, double[]> e : curves.entrySet()) {
            double[] v = Objects.requireNonNull(e.getValue(), e.getKey());
            int n = 0;
            for (double d : v) {
                n += Double.isFinite(d) && (!logY || d > 0) ? 1 : 0;
            }
            if (n == 0) {
                throw new IllegalArgumentException("lossCurve '" + title + "': curve '" + e.getKey() + "' has no "
                        + (logY ? "positive finite" : "finite") + " value among " + v.length);
            }
            double[] x = new double[n];
            double[] y = new double[n];
            int j = 0;
            for (int i = 0; i < v.length; i++) {
                if (Double.isFinite(v[i]) && (!logY || v[i] > 0)) {
                    x[j] = i;
                    y[j++] = v[i];
                }
            }
            addLine(c, e.getKey(), x, y, ChartStyle.PALETTE[k++ % ChartStyle.PALETTE.length]);
        }
        c.getStyler().setYAxisLogarithmic(logY);
        if (curves.size() == 1) {
            c.getStyler().setLegendVisible(false);
        }
        return c;
    }

    // --------------------------------------------------------------------------------------------------- heat map

    /** A heat map of {@code values[row][col]} with no axis titles; see the full overload. */
    public static HeatMapChart heatMap(String title, List<String> rows, List<String> cols, double[][] values) {
        return heatMap(title, "", "", rows, cols, values);
    }

    /**
     * A heat map of {@code values[row][col]}, for example sensitivity of layers (rows) to candidate quantizers
     * (columns). Rows run down the y axis in the given order (first row at the top), columns along x from the left.
     * NaN cells are left blank. Cell values are printed when there are at most 120 cells.
     *
     * @throws IllegalArgumentException if the labels do not match the shape of {@code values} or no value is finite
     */
    public static HeatMapChart heatMap(String title, String rowAxis, String colAxis, List<String> rows,
            List<String> cols, double[][] values) {
        if (rows.isEmpty() || cols.isEmpty() || values.length != rows.size()) {
            throw new IllegalArgumentException("heatMap '" + title + "': " + values.length + " rows of values for "
                    + rows.size() + " row labels and " + cols.size() + " column labels");
        }
        List<Number[]> cells = new ArrayList<>();
        double lo = Double.POSITIVE_INFINITY;
        double hi = Double.NEGATIVE_INFINITY;
        for (int r = 0; r < values.length; r++) {
            if (values[r].length != cols.size()) {
                throw new IllegalArgumentException("heatMap '" + title + "': row " + r + " ('" + rows.get(r)
                        + "') has " + values[r].length + " values for " + cols.size() + " columns");
            }
            for (int k = 0; k < cols.size(); k++) {
                double v = values[r][k];
                if (Double.isFinite(v)) {
                    // Three significant digits in the cell labels: XChart 4.0.3 prints the cell's number as given
                    // (its value formatter does not reach the labels), so the number is rounded here.
                    cells.add(new Number[] {k, rows.size() - 1 - r,
                        Double.parseDouble(String.format(Locale.ROOT, "%.3g", v))});
                    lo = Math.min(lo, v);
                    hi = Math.max(hi, v);
                }
            }
        }
        if (cells.isEmpty()) {
            throw new IllegalArgumentException("heatMap '" + title + "': no finite value");
        }
        HeatMapChart c = new HeatMapChartBuilder().width(WIDTH).height(HEIGHT).title(title).xAxisTitle(colAxis)
                .yAxisTitle(rowAxis).build();
        ChartStyle.apply(c.getStyler());
        c.getStyler().setPlotGridLinesVisible(false);
        c.getStyler().setLegendPosition(Styler.LegendPosition.OutsideE);
        // Light to mid blue, so that dark cell text stays readable; blank (NaN) cells show the grey plot background.
        c.getStyler().setRangeColors(new Color[] {new Color(0xF7FBFF), new Color(0xC6DBEF), new Color(0x6BAED6),
            new Color(0x3182BD)});
        c.getStyler().setPlotBackgroundColor(new Color(0xE4E4E4));
        c.getStyler().setValueFontColor(ChartStyle.INK);
        c.getStyler().setYAxisTickMarkSpacingHint(14);
        c.getStyler().setXAxisTickMarkSpacingHint(14);
        c.getStyler().setMin(lo);
        c.getStyler().setMax(hi == lo ? lo + 1 : hi);
        c.getStyler().setShowValue(rows.size() * cols.size() <= 120);
        c.getStyler().setValueFont(new java.awt.Font(java.awt.Font.SANS_SERIF, java.awt.Font.PLAIN, 10));
        c.getStyler().setHeatMapDecimalValueFormatter(v -> String.format(Locale.ROOT, "%.3g", v));
        c.getStyler().setDrawBorder(true);
        c.getStyler().setXAxisLabelRotation(cols.size() > 6 ? 45 : 0);
        List<String> bottomUp = new ArrayList<>(rows);
        java.util.Collections.reverse(bottomUp);
        c.addSeries("values", new ArrayList<>(cols), bottomUp, cells);
        return c;
    }

    // ----------------------------------------------------------------------------------------------------- pareto

    /** Size versus accuracy of candidates with their Pareto frontier; no baselines. */
    public static XYChart pareto(double[] sizes, double[] accuracies) {
        return pareto("Size versus accuracy", "size", "accuracy", sizes, accuracies, new double[0], new double[0],
                List.of());
    }

    /** Size versus accuracy of candidates with their Pareto frontier and unnamed baseline points. */
    public static XYChart pareto(double[] sizes, double[] accuracies, double[] baselineSizes,
            double[] baselineAccuracies) {
        return pareto("Size versus accuracy", "size", "accuracy", sizes, accuracies, baselineSizes,
                baselineAccuracies, List.of());
    }

    /**
     * Size (x) versus accuracy (y): the candidates as points, their Pareto frontier (the candidates that no other
     * candidate beats on both: no larger and at least as accurate, better in one) as a line, and baselines (for
     * example the float model and a plain int8 model) as diamonds, labelled when {@code baselineNames} is not empty.
     *
     * @throws IllegalArgumentException if array lengths differ, a value is not finite, or there are no candidates
     */
    public static XYChart pareto(String title, String sizeAxis, String accuracyAxis, double[] sizes,
            double[] accuracies, double[] baselineSizes, double[] baselineAccuracies, List<String> baselineNames) {
        checkPoints(title, "candidates", sizes, accuracies);
        checkPoints(title, "baselines", baselineSizes, baselineAccuracies);
        if (sizes.length == 0) {
            throw new IllegalArgumentException("pareto '" + title + "': no candidates");
        }
        if (!baselineNames.isEmpty() && baselineNames.size() != baselineSizes.length) {
            throw new IllegalArgumentException("pareto '" + title + "': " + baselineNames.size() + " names for "
                    + baselineSizes.length + " baselines");
        }
        XYChart c = xy(title, sizeAxis, accuracyAxis);
        XYSeries pts = c.addSeries("candidates", sizes.clone(), accuracies.clone());
        pts.setXYSeriesRenderStyle(XYSeriesRenderStyle.Scatter);
        pts.setMarker(SeriesMarkers.CIRCLE);
        pts.setMarkerColor(ChartStyle.translucent(ChartStyle.SKY, 200));
        int[] front = paretoFrontier(sizes, accuracies);
        double[] fx = new double[front.length];
        double[] fy = new double[front.length];
        for (int i = 0; i < front.length; i++) {
            fx[i] = sizes[front[i]];
            fy[i] = accuracies[front[i]];
        }
        XYSeries f = c.addSeries("Pareto frontier", fx, fy);
        f.setXYSeriesRenderStyle(XYSeriesRenderStyle.Line);
        f.setMarker(SeriesMarkers.CIRCLE);
        f.setMarkerColor(ChartStyle.BLUE);
        f.setLineColor(ChartStyle.BLUE);
        f.setLineStyle(ChartStyle.solid(1.6f));
        if (baselineSizes.length > 0) {
            XYSeries b = c.addSeries("baselines", baselineSizes.clone(), baselineAccuracies.clone());
            b.setXYSeriesRenderStyle(XYSeriesRenderStyle.Scatter);
            b.setMarker(SeriesMarkers.DIAMOND);
            b.setMarkerColor(ChartStyle.VERMILLION);
            // Labels sit a little above their diamonds; leave room for them under the top edge.
            double lo = Double.POSITIVE_INFINITY;
            double hi = Double.NEGATIVE_INFINITY;
            for (double[] ys : List.of(accuracies, baselineAccuracies)) {
                for (double y : ys) {
                    lo = Math.min(lo, y);
                    hi = Math.max(hi, y);
                }
            }
            double lift = 0.05 * (hi > lo ? hi - lo : Math.max(1, Math.abs(hi)));
            for (int i = 0; i < baselineNames.size(); i++) {
                c.addAnnotation(new AnnotationText(baselineNames.get(i), baselineSizes[i],
                        baselineAccuracies[i] + lift, false));
            }
            if (!baselineNames.isEmpty()) {
                c.getStyler().setYAxisMax(hi + 2 * lift);
            }
        }
        c.getStyler().setMarkerSize(8);
        c.getStyler().setLegendPosition(Styler.LegendPosition.InsideSE);
        c.getStyler().setAnnotationTextFont(new java.awt.Font(java.awt.Font.SANS_SERIF, java.awt.Font.PLAIN, 11));
        c.getStyler().setAnnotationTextFontColor(ChartStyle.VERMILLION);
        return c;
    }

    private static void checkPoints(String title, String what, double[] x, double[] y) {
        if (x.length != y.length) {
            throw new IllegalArgumentException("pareto '" + title + "': " + x.length + " sizes but " + y.length
                    + " accuracies for the " + what);
        }
        for (int i = 0; i < x.length; i++) {
            if (!Double.isFinite(x[i]) || !Double.isFinite(y[i])) {
                throw new IllegalArgumentException("pareto '" + title + "': " + what + " point " + i + " is ("
                        + x[i] + ", " + y[i] + "); values must be finite");
            }
        }
    }

    /**
     * The indices of the non-dominated points, by increasing size: point i is on the frontier when no point j has
     * {@code size[j] <= size[i]} and {@code acc[j] >= acc[i]} with one of them strict. Of exact duplicates, one is kept.
     */
    static int[] paretoFrontier(double[] sizes, double[] accuracies) {
        Integer[] order = new Integer[sizes.length];
        for (int i = 0; i < order.length; i++) {
            order[i] = i;
        }
        Arrays.sort(order, Comparator.comparingDouble((Integer i) -> sizes[i])
                .thenComparing(Comparator.comparingDouble((Integer i) -> accuracies[i]).reversed()));
        List<Integer> front = new ArrayList<>();
        double best = Double.NEGATIVE_INFINITY;
        for (int i : order) {
            if (accuracies[i] > best) {
                front.add(i);
                best = accuracies[i];
            }
        }
        return front.stream().mapToInt(Integer::intValue).toArray();
    }

    // ------------------------------------------------------------------------------------------- building blocks

    private static XYChart xy(String title, String xAxis, String yAxis) {
        XYChart c = new XYChartBuilder().width(WIDTH).height(HEIGHT).title(title).xAxisTitle(xAxis)
                .yAxisTitle(yAxis).build();
        ChartStyle.apply(c.getStyler());
        return c;
    }

    private static void addLine(XYChart c, String name, double[] x, double[] y, Color color) {
        XYSeries s = c.addSeries(name, x, y);
        s.setXYSeriesRenderStyle(XYSeriesRenderStyle.Line);
        s.setLineColor(color);
        s.setMarkerColor(color);
        s.setLineStyle(ChartStyle.solid(1.6f));
        s.setMarker(x.length <= MAX_MARKED_POINTS ? SeriesMarkers.CIRCLE : SeriesMarkers.NONE);
    }

    /**
     * Integer tick labels every "nice" step (1, 2, 5 x 10^k, about eight labels) for an index axis (channels, steps)
     * of {@code n} points. XChart gives evenly spaced data one tick per point, as many as fit side by side, which
     * crowds the axis; the labels in between are left blank and the vertical grid is off.
     */
    private static void integerXAxis(XYChart c, int n) {
        // XChart places the ticks (about one per 74 px by default); integer labels only. A formatting function would
        // make it tick every few points instead, and filtering those ticks left only "0" for long axes.
        c.getStyler().setXAxisDecimalPattern("0");
        c.getStyler().setXAxisTickMarkSpacingHint(n <= 12 ? Math.max(20, 480 / Math.max(1, n)) : 110);
        c.getStyler().setPlotGridVerticalLinesVisible(false);
    }

    private static String display(Tensor t) {
        return t.name() == null ? "tensor" : t.name();
    }

    // ------------------------------------------------------------------------------------------------- rendering

    /**
     * Draws the chart into an image of {@code scale} times its size (scale 2 for high-density screens), on white.
     *
     * @throws IllegalArgumentException if {@code scale} is not in [1, {@value #MAX_SCALE}], or the chart cannot be
     *     drawn (for example a logarithmic axis with a non-positive value); the message names the chart's title
     */
    public static BufferedImage toImage(IChart chart, int scale) {
        Objects.requireNonNull(chart, "chart");
        if (scale < 1 || scale > MAX_SCALE) {
            throw new IllegalArgumentException("chart '" + chart.getTitle() + "': scale must be in [1, " + MAX_SCALE
                    + "], got " + scale);
        }
        int w = chart.getWidth();
        int h = chart.getHeight();
        if (w < 1 || h < 1 || (long) w * h * scale * scale > 64L << 20) {
            throw new IllegalArgumentException("chart '" + chart.getTitle() + "': size " + w + " x " + h
                    + " at scale " + scale + " is empty or too large to draw");
        }
        BufferedImage img = new BufferedImage(w * scale, h * scale, BufferedImage.TYPE_INT_RGB);
        Graphics2D g = img.createGraphics();
        try {
            g.setColor(Color.WHITE);
            g.fillRect(0, 0, w * scale, h * scale);
            g.setRenderingHint(RenderingHints.KEY_ANTIALIASING, RenderingHints.VALUE_ANTIALIAS_ON);
            g.setRenderingHint(RenderingHints.KEY_TEXT_ANTIALIASING, RenderingHints.VALUE_TEXT_ANTIALIAS_ON);
            g.setRenderingHint(RenderingHints.KEY_STROKE_CONTROL, RenderingHints.VALUE_STROKE_PURE);
            g.setRenderingHint(RenderingHints.KEY_RENDERING, RenderingHints.VALUE_RENDER_QUALITY);
            g.scale(scale, scale);
            chart.paint(g, w, h);
        } catch (RuntimeException e) {
            throw cannotDraw(chart, e);
        } finally {
            g.dispose();
        }
        return img;
    }

    /** The chart as PNG bytes at {@code scale} times its size; see {@link #toImage(IChart, int)}. */
    public static byte[] toPngBytes(IChart chart, int scale) {
        BufferedImage img = toImage(chart, scale);
        ByteArrayOutputStream out = new ByteArrayOutputStream();
        try {
            if (!ImageIO.write(img, "png", out)) {
                throw new IllegalStateException("no PNG writer in this JDK");
            }
        } catch (IOException e) {
            throw new UncheckedIOException("chart '" + chart.getTitle() + "': PNG encoding failed", e);
        }
        return out.toByteArray();
    }

    /**
     * The chart as an SVG document (text and shapes as vectors, drawn by XChart through VectorGraphics2D).
     *
     * @throws IllegalArgumentException if the chart cannot be drawn; the message names the chart's title
     */
    public static String toSvgString(IChart chart) {
        Objects.requireNonNull(chart, "chart");
        ByteArrayOutputStream out = new ByteArrayOutputStream();
        try {
            VectorGraphicsEncoder.saveVectorGraphic(chart, out, VectorGraphicsEncoder.VectorGraphicsFormat.SVG);
        } catch (IOException e) {
            throw new UncheckedIOException("chart '" + chart.getTitle() + "': SVG encoding failed", e);
        } catch (RuntimeException e) {
            throw cannotDraw(chart, e);
        }
        return out.toString(StandardCharsets.UTF_8);
    }

    /** Saves the chart as a PNG at scale 2 (twice its size in pixels, sharp on high-density screens). */
    public static void savePng(IChart chart, Path path) {
        savePng(chart, path, 2);
    }

    /**
     * Saves the chart as a PNG of {@code scale} times its size, atomically (see the class notes).
     *
     * @throws IllegalArgumentException if the scale is out of range or the chart cannot be drawn (nothing is written)
     * @throws UncheckedIOException naming the path if the file cannot be written (an existing file is kept)
     */
    public static void savePng(IChart chart, Path path, int scale) {
        Objects.requireNonNull(path, "path");
        writeAtomically(path, toPngBytes(chart, scale));
    }

    /**
     * Saves the chart as an SVG file, atomically (see the class notes).
     *
     * @throws IllegalArgumentException if the chart cannot be drawn (nothing is written)
     * @throws UncheckedIOException naming the path if the file cannot be written (an existing file is kept)
     */
    public static void saveSvg(IChart chart, Path path) {
        Objects.requireNonNull(path, "path");
        writeAtomically(path, toSvgString(chart).getBytes(StandardCharsets.UTF_8));
    }

    private static IllegalArgumentException cannotDraw(IChart chart, RuntimeException e) {
        return new IllegalArgumentException("chart '" + chart.getTitle() + "' cannot be drawn: " + e.getMessage(), e);
    }

    private static void writeAtomically(Path target, byte[] bytes) {
        try {
            dev.rungbook.internal.AtomicFile.write(target, bytes);
        } catch (java.io.IOException e) {
            Path abs = target.toAbsolutePath();
            throw new java.io.UncheckedIOException("cannot write " + abs + ": " + e.getMessage(), e);
        }
    }
}
