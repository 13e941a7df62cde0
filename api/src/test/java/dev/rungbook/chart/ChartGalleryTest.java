package dev.rungbook.chart;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.tensor.Tensor;
import dev.rungbook.testing.Fixtures;
import java.awt.image.BufferedImage;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.LinkedHashMap;
import java.util.List;
import java.util.Map;
import org.junit.jupiter.api.Test;
import org.knowm.xchart.internal.chartpart.IChart;
import org.w3c.dom.Document;
import tech.tablesaw.api.DoubleColumn;
import tech.tablesaw.api.StringColumn;
import tech.tablesaw.api.Table;

/**
 * Draws one of every chart into target/chart-gallery (PNG at scale 2 and SVG), for a person to look at, and checks
 * that each PNG decodes to twice the chart size with a drawing on it and each SVG parses with an svg root element.
 */
class ChartGalleryTest {
    static Tensor weights() {
        float[] v = Fixtures.gaussian(42, 64 * 128);
        for (int i = 0; i < v.length; i++) {
            v[i] *= 0.02f * (1 + (i / 128) % 5);
        }
        return Tensor.of(v, 64, 128).withName("blocks.0.mlp.weight");
    }

    static Tensor roundToGrid(Tensor t, float[] levels) {
        float[] v = t.toFloatArray();
        for (int i = 0; i < v.length; i++) {
            float best = levels[0];
            for (float l : levels) {
                if (Math.abs(l - v[i]) < Math.abs(best - v[i])) {
                    best = l;
                }
            }
            v[i] = best;
        }
        return Tensor.of(v, t.shape()).withName(t.name());
    }

    static float[] uniformLevels(float step, int n) {
        float[] l = new float[n];
        for (int i = 0; i < n; i++) {
            l[i] = (i - n / 2) * step;
        }
        return l;
    }

    @Test
    void drawsTheGallery() throws Exception {
        Path dir = Path.of("target", "chart-gallery");
        Files.createDirectories(dir);
        Tensor w = weights();
        float[] l16 = uniformLevels(0.03f, 16);
        float[] l256 = uniformLevels(0.0019f, 256);
        Table study = Table.create("study",
                StringColumn.create("spec", "int linear", "int linear", "int linear", "codebook", "codebook", "codebook"),
                DoubleColumn.create("bits_per_weight", 4.25, 6.25, 8.25, 2.1, 3.1, 4.1),
                DoubleColumn.create("sqnr_db", 19.5, 31.6, 43.7, 9.3, 14.9, 20.4));
        Map<String, double[]> losses = new LinkedHashMap<>();
        double[] a = new double[200];
        double[] b = new double[200];
        for (int i = 0; i < 200; i++) {
            a[i] = 2.0 * Math.exp(-i / 40.0) + 0.1 + 0.02 * Math.sin(i);
            b[i] = 1.5 * Math.exp(-i / 25.0) + 0.15;
        }
        losses.put("training", a);
        losses.put("learned rounding", b);
        Map<String, IChart> charts = new LinkedHashMap<>();
        charts.put("histogram", Charts.histogram(w));
        charts.put("histogram-log", Charts.histogramLog(w));
        charts.put("before-after-16", Charts.histogram(w, roundToGrid(w, l16), l16));
        charts.put("before-after-256-log", Charts.histogramLog(w, roundToGrid(w, l256), l256));
        charts.put("channel-ranges", Charts.channelRanges(w, 0));
        charts.put("channel-ranges-sorted", Charts.channelRanges(w, 0, true));
        charts.put("error-vs-bits", Charts.errorVsBits(study));
        charts.put("loss", Charts.lossCurve("Loss during training", losses, true));
        charts.put("heatmap", Charts.heatMap("Sensitivity (SQNR dB)", "layer", "candidate",
                List.of("fc1", "fc2", "fc3", "head"), List.of("int8", "int4", "nf4", "fp8"),
                new double[][] {{44, 20, 21, 31}, {43, 19, 20.5, 30}, {40, 15, Double.NaN, 28}, {45, 22, 23, 33}}));
        charts.put("pareto", Charts.pareto("Size versus accuracy", "size (KiB)", "accuracy (%)",
                new double[] {100, 120, 140, 160, 180, 200, 130, 150}, new double[] {80, 86, 88, 90.5, 91, 91.2, 84, 87},
                new double[] {400, 110}, new double[] {91.5, 82}, List.of("float32", "int4 per-tensor")));
        for (Map.Entry<String, IChart> e : charts.entrySet()) {
            Path png = dir.resolve(e.getKey() + ".png");
            Path svg = dir.resolve(e.getKey() + ".svg");
            Charts.savePng(e.getValue(), png, 2);
            Charts.saveSvg(e.getValue(), svg);
            BufferedImage img = ChartsTest.decodePng(Files.readAllBytes(png));
            assertEquals(2 * Charts.WIDTH, img.getWidth(), png.toString());
            assertEquals(2 * Charts.HEIGHT, img.getHeight(), png.toString());
            ChartsTest.assertNotBlank(img);
            Document doc = ChartsTest.parseXml(Files.readString(svg));
            assertEquals("svg", doc.getDocumentElement().getLocalName(), svg.toString());
            assertTrue(doc.getElementsByTagNameNS("*", "path").getLength() > 10, "shapes drawn in " + svg);
        }
    }
}
