package dev.rungbook.render;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertTrue;

import java.awt.image.BufferedImage;
import java.io.ByteArrayInputStream;
import java.util.Base64;
import java.util.Map;
import javax.imageio.ImageIO;
import org.junit.jupiter.api.Test;
import org.knowm.xchart.XYChart;
import org.knowm.xchart.XYChartBuilder;

class ChartRendererTest {
    private static XYChart chart() {
        XYChart c = new XYChartBuilder().width(300).height(200).title("error vs bits").build();
        c.addSeries("mse", new double[] {2, 4, 8}, new double[] {0.3, 0.05, 0.001});
        return c;
    }

    @Test
    void pngIsDrawnAtTwiceTheChartSizeAndShownAtItsSize() throws Exception {
        MimeBundle b = ChartRenderer.render(chart());
        byte[] png = Base64.getDecoder().decode((String) b.data().get(MimeBundle.PNG));
        // Source: the PNG is decoded by javax.imageio, independent of the encoder's bookkeeping.
        BufferedImage img = ImageIO.read(new ByteArrayInputStream(png));
        assertEquals(600, img.getWidth());
        assertEquals(400, img.getHeight());
        assertEquals(Map.of("width", 300, "height", 200), b.metadata().get(MimeBundle.PNG));
    }

    @Test
    void svgAndTextAreIncluded() {
        MimeBundle b = ChartRenderer.render(chart());
        String svg = (String) b.data().get(MimeBundle.SVG);
        assertTrue(svg.contains("<svg"), svg.substring(0, Math.min(200, svg.length())));
        assertEquals("XYChart \"error vs bits\" (300x200)", b.plainText());
    }
}
