package dev.rungbook.chart;

import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertFalse;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.metrics.TensorStats;
import dev.rungbook.tensor.Tensor;
import dev.rungbook.testing.Fixtures;
import java.awt.image.BufferedImage;
import java.io.ByteArrayInputStream;
import java.io.IOException;
import java.io.UncheckedIOException;
import java.nio.charset.StandardCharsets;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.ArrayList;
import java.util.Arrays;
import java.util.HashSet;
import java.util.LinkedHashMap;
import java.util.List;
import java.util.Map;
import java.util.Random;
import java.util.Set;
import java.util.stream.Collectors;
import java.util.stream.Stream;
import javax.imageio.ImageIO;
import javax.xml.parsers.DocumentBuilder;
import javax.xml.parsers.DocumentBuilderFactory;
import org.junit.jupiter.api.Test;
import org.knowm.xchart.HeatMapChart;
import org.knowm.xchart.XYChart;
import org.knowm.xchart.XYSeries;
import org.knowm.xchart.XYSeries.XYSeriesRenderStyle;
import org.w3c.dom.Document;
import tech.tablesaw.api.DoubleColumn;
import tech.tablesaw.api.IntColumn;
import tech.tablesaw.api.StringColumn;
import tech.tablesaw.api.Table;

class ChartsTest {
    private static Tensor weights() {
        return ChartGalleryTest.weights();
    }

    // Source for the histogram checks: a direct count of the tensor's values against the series' own bin edges.
    private static long[] directCount(Tensor t, double[] edges) {
        long[] c = new long[edges.length - 1];
        for (float f : t.toFloatArray()) {
            for (int i = 0; i < c.length; i++) {
                boolean last = i == c.length - 1;
                if (f >= edges[i] && (f < edges[i + 1] || (last && f == edges[i + 1]))) {
                    c[i]++;
                    break;
                }
            }
        }
        return c;
    }

    private static long[] seriesCounts(XYSeries s) {
        double[] y = s.getYData();
        long[] c = new long[y.length - 1];
        for (int i = 0; i < c.length; i++) {
            // The log-axis floor stands for an empty bin; anything else must be a whole count.
            c[i] = y[i] == Charts.LOG_FLOOR ? 0 : (long) y[i];
            if (y[i] != Charts.LOG_FLOOR) {
                assertEquals(c[i], y[i], 0);
            }
        }
        return c;
    }

    private static XYSeries onlySeriesStartingWith(XYChart c, String prefix) {
        List<XYSeries> found = c.getSeriesCollection().stream().filter(s -> s.getName().startsWith(prefix))
                .collect(Collectors.toList());
        assertEquals(1, found.size(), "series starting with " + prefix);
        return found.get(0);
    }

    static BufferedImage decodePng(byte[] png) throws IOException {
        BufferedImage img = ImageIO.read(new ByteArrayInputStream(png));
        assertTrue(img != null, "not a PNG ImageIO can read");
        return img;
    }

    static void assertNotBlank(BufferedImage img) {
        Set<Integer> colours = new HashSet<>();
        long nonWhite = 0;
        for (int y = 0; y < img.getHeight(); y += 2) {
            for (int x = 0; x < img.getWidth(); x += 2) {
                int rgb = img.getRGB(x, y) & 0xFFFFFF;
                colours.add(rgb);
                nonWhite += rgb == 0xFFFFFF ? 0 : 1;
            }
        }
        long sampled = (long) ((img.getHeight() + 1) / 2) * ((img.getWidth() + 1) / 2);
        assertTrue(nonWhite > sampled / 100, "almost blank: " + nonWhite + " of " + sampled + " pixels drawn");
        assertTrue(colours.size() > 8, "only " + colours.size() + " colours");
    }

    static Document parseXml(String xml) throws Exception {
        DocumentBuilderFactory f = DocumentBuilderFactory.newInstance();
        f.setNamespaceAware(true);
        // The SVG names the W3C DTD; do not fetch it.
        f.setFeature("http://apache.org/xml/features/nonvalidating/load-external-dtd", false);
        DocumentBuilder b = f.newDocumentBuilder();
        return b.parse(new ByteArrayInputStream(xml.getBytes(StandardCharsets.UTF_8)));
    }

    private static XYChart failingChart() {
        // A logarithmic axis cannot show 0: XChart refuses while drawing.
        XYChart c = Charts.lossCurve(new double[] {1, 2, 3});
        c.getStyler().setYAxisLogarithmic(true);
        XYSeries s = c.addSeries("zero", new double[] {0, 1}, new double[] {0, 1});
        s.setXYSeriesRenderStyle(XYSeriesRenderStyle.Line);
        c.setTitle("deliberately broken");
        return c;
    }

    @Test
    void pngHasScaledSizeAndIsNotBlank() throws Exception {
        XYChart c = Charts.histogram(weights());
        assertEquals(Charts.WIDTH, c.getWidth());
        assertEquals(Charts.HEIGHT, c.getHeight());
        for (int scale : new int[] {1, 2}) {
            BufferedImage img = decodePng(Charts.toPngBytes(c, scale));
            assertEquals(scale * 600, img.getWidth());
            assertEquals(scale * 400, img.getHeight());
            assertNotBlank(img);
        }
        assertThrows(IllegalArgumentException.class, () -> Charts.toPngBytes(c, 0));
        assertThrows(IllegalArgumentException.class, () -> Charts.toPngBytes(c, Charts.MAX_SCALE + 1));
    }

    @Test
    void histogramSeriesHoldsTheBinCounts() {
        Tensor w = weights();
        XYChart c = Charts.histogram(w, 40, false);
        XYSeries s = onlySeriesStartingWith(c, "values");
        double[] edges = s.getXData();
        assertEquals(41, edges.length);
        assertArrayEquals(directCount(w, edges), seriesCounts(s));
        TensorStats st = TensorStats.of(w);
        assertEquals(st.min(), edges[0], 0);
        assertEquals(st.max(), edges[40], 0);
    }

    @Test
    void beforeAfterShareBinsAndMarkFewGridLevelsAsLines() {
        Tensor w = weights();
        float[] levels = ChartGalleryTest.uniformLevels(0.03f, 16);
        Tensor q = ChartGalleryTest.roundToGrid(w, levels);
        float[] withJunk = Arrays.copyOf(levels, levels.length + 3);
        withJunk[16] = levels[3]; // duplicate
        withJunk[17] = Float.NaN;
        withJunk[18] = Float.POSITIVE_INFINITY;
        XYChart c = Charts.histogram(w, q, withJunk);
        XYSeries before = onlySeriesStartingWith(c, "before");
        XYSeries after = onlySeriesStartingWith(c, "after");
        assertArrayEquals(before.getXData(), after.getXData(), 0);
        assertArrayEquals(directCount(w, before.getXData()), seriesCounts(before));
        assertArrayEquals(directCount(q, after.getXData()), seriesCounts(after));
        List<XYSeries> marks = c.getSeriesCollection().stream().filter(s -> s.getName().startsWith("grid level"))
                .collect(Collectors.toList());
        assertEquals(16, marks.size());
        assertEquals(1, marks.stream().filter(XYSeries::isShowInLegend).count());
        Set<Double> xs = marks.stream().map(s -> s.getXData()[0]).collect(Collectors.toSet());
        for (float l : levels) {
            assertTrue(xs.contains((double) l), "level " + l + " marked");
        }
        // The shared range covers both tensors and every level.
        double[] edges = before.getXData();
        assertTrue(edges[0] <= Math.min(TensorStats.of(w).min(), levels[0]));
        assertTrue(edges[edges.length - 1] >= Math.max(TensorStats.of(w).max(), levels[15]));
    }

    @Test
    void manyGridLevelsBecomeATickStrip() throws Exception {
        Tensor w = weights();
        float[] levels = ChartGalleryTest.uniformLevels(0.0019f, 256);
        XYChart c = Charts.histogramLog(w, ChartGalleryTest.roundToGrid(w, levels), levels);
        XYSeries strip = onlySeriesStartingWith(c, "grid levels");
        assertEquals(256, strip.getXData().length);
        assertEquals(XYSeriesRenderStyle.Scatter, strip.getXYSeriesRenderStyle().orElseThrow());
        assertTrue(c.getStyler().isYAxisLogarithmic());
        // Empty bins sit at the log axis floor, below any real count, and the chart still draws.
        XYSeries after = onlySeriesStartingWith(c, "after");
        assertTrue(Arrays.stream(after.getYData()).anyMatch(y -> y == Charts.LOG_FLOOR));
        assertTrue(Arrays.stream(after.getYData()).noneMatch(y -> y < Charts.LOG_FLOOR || Double.isNaN(y)));
        assertArrayEquals(directCount(ChartGalleryTest.roundToGrid(w, levels), after.getXData()),
                seriesCounts(after));
        assertNotBlank(decodePng(Charts.toPngBytes(c, 1)));
    }

    @Test
    void channelRangesHoldPerChannelMinAndMax() {
        Tensor w = weights();
        List<TensorStats> per = TensorStats.perChannel(w, 0);
        XYChart c = Charts.channelRanges(w, 0);
        double[] max = c.getSeries("max").getYData();
        double[] min = c.getSeries("min").getYData();
        assertEquals(per.size(), max.length);
        for (int i = 0; i < per.size(); i++) {
            assertEquals(per.get(i).max(), max[i], 0);
            assertEquals(per.get(i).min(), min[i], 0);
        }
        XYChart sorted = Charts.channelRanges(w, 0, true);
        double[] smax = sorted.getSeries("max").getYData();
        double[] smin = sorted.getSeries("min").getYData();
        for (int i = 1; i < smax.length; i++) {
            assertTrue(smax[i] - smin[i] <= smax[i - 1] - smin[i - 1], "widest first at rank " + i);
        }
        double[] a = max.clone();
        double[] b = smax.clone();
        Arrays.sort(a);
        Arrays.sort(b);
        assertArrayEquals(a, b, 0);
        assertThrows(IllegalArgumentException.class, () -> Charts.channelRanges(w, 5));
    }

    @Test
    void degenerateTensorsStillDraw() throws Exception {
        float[] v = new float[4 * 8];
        Arrays.fill(v, 0.25f);
        for (int j = 0; j < 8; j++) {
            v[2 * 8 + j] = Float.NaN; // channel 2 has no finite value: a gap in the range chart
        }
        Tensor t = Tensor.of(v, 4, 8).withName("odd");
        XYChart ranges = Charts.channelRanges(t, 0, true);
        assertTrue(Double.isNaN(ranges.getSeries("max").getYData()[3]), "the empty channel ranks last");
        assertNotBlank(decodePng(Charts.toPngBytes(ranges, 1)));
        Tensor allNan = Tensor.of(new float[] {Float.NaN, Float.NaN}, 2);
        for (XYChart c : List.of(Charts.histogram(t), Charts.histogramLog(t), Charts.histogram(allNan),
                Charts.histogram(allNan, t, new float[] {0.25f}))) {
            assertNotBlank(decodePng(Charts.toPngBytes(c, 1)));
        }
        // A constant tensor gets a small range around its value, holding every finite value.
        XYSeries s = onlySeriesStartingWith(Charts.histogram(t), "values");
        assertEquals(24, Arrays.stream(seriesCounts(s)).sum());
    }

    @Test
    void errorVsBitsMakesOneSortedSeriesPerFamily() {
        Table t = Table.create("study", StringColumn.create("family", "int", "fp", "int", "int", "fp"),
                DoubleColumn.create("bpw", 8.25, 8, 4.25, Double.NaN, 4),
                DoubleColumn.create("mse", 1e-5, 2e-5, 3e-3, 1.0, 4e-3));
        XYChart c = Charts.errorVsBits(t, "bpw", "mse", "family", true);
        assertEquals(List.of("int", "fp"),
                c.getSeriesCollection().stream().map(XYSeries::getName).collect(Collectors.toList()));
        assertArrayEquals(new double[] {4.25, 8.25}, c.getSeries("int").getXData(), 0);
        assertArrayEquals(new double[] {3e-3, 1e-5}, c.getSeries("int").getYData(), 0);
        assertArrayEquals(new double[] {4, 8}, c.getSeries("fp").getXData(), 0);
        assertTrue(c.getStyler().isYAxisLogarithmic());

        Table defaults = Table.create("s", StringColumn.create("spec", "x", "x"),
                IntColumn.create("bits_per_weight", 4, 8), DoubleColumn.create("sqnr_db", 20, 44));
        XYChart d = Charts.errorVsBits(defaults);
        assertArrayEquals(new double[] {20, 44}, d.getSeries("x").getYData(), 0);
    }

    @Test
    void errorVsBitsNamesTheBadColumn() {
        Table t = Table.create("study", StringColumn.create("spec", "a"), DoubleColumn.create("bits", 4.0),
                DoubleColumn.create("mse", 0.0));
        IllegalArgumentException missing = assertThrows(IllegalArgumentException.class,
                () -> Charts.errorVsBits(t));
        assertTrue(missing.getMessage().contains("'bits_per_weight'") && missing.getMessage().contains("[spec, bits, mse]"),
                missing.getMessage());
        IllegalArgumentException text = assertThrows(IllegalArgumentException.class,
                () -> Charts.errorVsBits(t, "spec", "mse", "spec"));
        assertTrue(text.getMessage().contains("'spec'") && text.getMessage().contains("not numeric"),
                text.getMessage());
        IllegalArgumentException log = assertThrows(IllegalArgumentException.class,
                () -> Charts.errorVsBits(t, "bits", "mse", "spec", true));
        assertTrue(log.getMessage().contains("logarithmic"), log.getMessage());
    }

    @Test
    void lossCurveSkipsNonFiniteStepsButKeepsStepNumbers() {
        XYChart c = Charts.lossCurve(new double[] {4, 3, Double.NaN, 2, Double.POSITIVE_INFINITY, 1});
        XYSeries s = c.getSeries("loss");
        assertArrayEquals(new double[] {0, 1, 3, 5}, s.getXData(), 0);
        assertArrayEquals(new double[] {4, 3, 2, 1}, s.getYData(), 0);
        XYChart two = Charts.lossCurve("runs", new double[] {1, 0.5}, new double[] {2, 1, 0.7});
        assertEquals(2, two.getSeriesCollection().size());
        assertEquals(3, two.getSeries("curve 2").getXData().length);
        assertThrows(IllegalArgumentException.class, () -> Charts.lossCurve(new double[] {Double.NaN}));
        Map<String, double[]> m = new LinkedHashMap<>();
        m.put("zero", new double[] {0, 0});
        assertThrows(IllegalArgumentException.class, () -> Charts.lossCurve("log", m, true));
    }

    @Test
    void heatMapChecksItsShape() {
        HeatMapChart c = Charts.heatMap("sens", List.of("a", "b"), List.of("x", "y"),
                new double[][] {{1, 2}, {3, 4}});
        assertEquals("sens", c.getTitle());
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                () -> Charts.heatMap("sens", List.of("a", "b"), List.of("x", "y"), new double[][] {{1, 2}, {3}}));
        assertTrue(e.getMessage().contains("row 1 ('b') has 1 values for 2 columns"), e.getMessage());
        assertThrows(IllegalArgumentException.class,
                () -> Charts.heatMap("sens", List.of("a"), List.of("x"), new double[][] {{Double.NaN}}));
    }

    @Test
    void paretoFrontierMatchesTheDominanceDefinition() {
        // Source: the definition of Pareto dominance, checked by brute force over all pairs.
        Random r = Fixtures.random(17);
        for (int trial = 0; trial < 20; trial++) {
            int n = 1 + r.nextInt(40);
            double[] size = new double[n];
            double[] acc = new double[n];
            for (int i = 0; i < n; i++) {
                size[i] = r.nextInt(10);
                acc[i] = r.nextInt(10);
            }
            Set<String> expected = new HashSet<>();
            for (int i = 0; i < n; i++) {
                boolean dominated = false;
                for (int j = 0; j < n; j++) {
                    dominated |= size[j] <= size[i] && acc[j] >= acc[i] && (size[j] < size[i] || acc[j] > acc[i]);
                }
                if (!dominated) {
                    expected.add(size[i] + "," + acc[i]);
                }
            }
            int[] front = Charts.paretoFrontier(size, acc);
            Set<String> got = new HashSet<>();
            for (int i = 0; i < front.length; i++) {
                got.add(size[front[i]] + "," + acc[front[i]]);
                if (i > 0) {
                    assertTrue(size[front[i]] > size[front[i - 1]], "frontier ordered by size");
                }
            }
            assertEquals(expected, got);
            assertEquals(expected.size(), front.length, "duplicates kept once");
        }
    }

    @Test
    void paretoChartHasCandidatesFrontierAndBaselines() {
        XYChart c = Charts.pareto("p", "KiB", "acc", new double[] {10, 20, 30}, new double[] {0.6, 0.5, 0.9},
                new double[] {80}, new double[] {0.92}, List.of("float32"));
        assertArrayEquals(new double[] {10, 30}, c.getSeries("Pareto frontier").getXData(), 0);
        assertArrayEquals(new double[] {80}, c.getSeries("baselines").getXData(), 0);
        assertThrows(IllegalArgumentException.class,
                () -> Charts.pareto(new double[] {1, 2}, new double[] {1}));
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                () -> Charts.pareto(new double[] {1, Double.NaN}, new double[] {1, 2}));
        assertTrue(e.getMessage().contains("point 1"), e.getMessage());
    }

    private static List<Path> listing(Path dir) throws IOException {
        try (Stream<Path> s = Files.list(dir)) {
            return s.sorted().collect(Collectors.toCollection(ArrayList::new));
        }
    }

    @Test
    void savingReplacesTheFileAndLeavesNoTemporaryFiles() throws Exception {
        Path dir = Fixtures.tempDir("charts");
        Path png = dir.resolve("h.png");
        Path svg = dir.resolve("h.svg");
        Files.writeString(png, "old");
        Files.writeString(svg, "old");
        XYChart c = Charts.histogram(weights());
        Charts.savePng(c, png, 2);
        Charts.saveSvg(c, svg);
        assertEquals(List.of(png, svg), listing(dir));
        BufferedImage img = ImageIO.read(png.toFile());
        assertEquals(1200, img.getWidth());
        assertEquals(800, img.getHeight());
        assertEquals("svg", parseXml(Files.readString(svg)).getDocumentElement().getLocalName());
        Charts.savePng(c, dir.resolve("default.png"));
        assertEquals(1200, ImageIO.read(dir.resolve("default.png").toFile()).getWidth());
    }

    @Test
    void aChartThatCannotBeDrawnLeavesTheOldFileIntact() throws Exception {
        Path dir = Fixtures.tempDir("charts");
        Path png = dir.resolve("keep.png");
        Path svg = dir.resolve("keep.svg");
        Files.writeString(png, "old png");
        Files.writeString(svg, "old svg");
        XYChart bad = failingChart();
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class, () -> Charts.savePng(bad, png, 1));
        assertTrue(e.getMessage().contains("deliberately broken"), e.getMessage());
        assertThrows(IllegalArgumentException.class, () -> Charts.saveSvg(bad, svg));
        assertEquals("old png", Files.readString(png));
        assertEquals("old svg", Files.readString(svg));
        assertEquals(List.of(png, svg), listing(dir));
    }

    @Test
    void aWriteThatFailsNamesThePath() throws Exception {
        Path dir = Fixtures.tempDir("charts");
        Path nowhere = dir.resolve("missing-folder").resolve("x.png");
        UncheckedIOException e = assertThrows(UncheckedIOException.class,
                () -> Charts.savePng(Charts.lossCurve(new double[] {1, 2}), nowhere, 1));
        assertTrue(e.getMessage().contains("missing-folder"), e.getMessage());
        assertFalse(Files.exists(nowhere));
        // A target that is a folder cannot be replaced by a file: the rename fails, the folder and its content stay.
        Path folder = Files.createDirectories(dir.resolve("taken.png"));
        Files.writeString(folder.resolve("inside.txt"), "x");
        assertThrows(UncheckedIOException.class, () -> Charts.savePng(Charts.lossCurve(new double[] {1, 2}),
                folder, 1));
        assertTrue(Files.isDirectory(folder));
        assertEquals(List.of(folder), listing(dir), "no temporary file left behind");
    }
}
