package dev.rungbook.render;

import java.awt.Graphics2D;
import java.awt.RenderingHints;
import java.awt.image.BufferedImage;
import java.io.ByteArrayOutputStream;
import java.io.IOException;
import java.io.UncheckedIOException;
import java.nio.charset.StandardCharsets;
import java.util.Base64;
import java.util.Map;
import javax.imageio.ImageIO;
import org.knowm.xchart.VectorGraphicsEncoder;
import org.knowm.xchart.internal.chartpart.Chart;

/**
 * XChart charts to {@code image/png} drawn at {@link #SCALE} times the chart's size (sharp on high-density screens;
 * the metadata asks the front end to show it at the chart's own size) and to {@code image/svg+xml}.
 */
public final class ChartRenderer {
    /** Pixel density of the PNG relative to the chart's size. */
    public static final int SCALE = 2;

    private ChartRenderer() {
    }

    /** Renders {@code chart} as PNG, SVG and a one-line text description. */
    public static MimeBundle render(Chart<?, ?> chart) {
        int w = chart.getWidth();
        int h = chart.getHeight();
        String title = chart.getTitle() == null || chart.getTitle().isBlank() ? "" : " \"" + chart.getTitle() + "\"";
        return MimeBundle.text(chart.getClass().getSimpleName() + title + " (" + w + "x" + h + ")")
                .with(MimeBundle.PNG, Base64.getEncoder().encodeToString(png(chart, SCALE)))
                .withMetadata(MimeBundle.PNG, Map.of("width", w, "height", h))
                .with(MimeBundle.SVG, svg(chart));
    }

    /** PNG bytes of the chart drawn at {@code scale} times its size. */
    public static byte[] png(Chart<?, ?> chart, int scale) {
        int w = chart.getWidth();
        int h = chart.getHeight();
        BufferedImage image = new BufferedImage(w * scale, h * scale, BufferedImage.TYPE_INT_ARGB);
        Graphics2D g = image.createGraphics();
        try {
            g.setRenderingHint(RenderingHints.KEY_ANTIALIASING, RenderingHints.VALUE_ANTIALIAS_ON);
            g.setRenderingHint(RenderingHints.KEY_TEXT_ANTIALIASING, RenderingHints.VALUE_TEXT_ANTIALIAS_ON);
            g.scale(scale, scale);
            chart.paint(g, w, h);
        } finally {
            g.dispose();
        }
        ByteArrayOutputStream out = new ByteArrayOutputStream();
        try {
            ImageIO.write(image, "png", out);
        } catch (IOException e) {
            throw new UncheckedIOException("PNG encoding of chart failed", e);
        }
        return out.toByteArray();
    }

    /** SVG text of the chart. */
    public static String svg(Chart<?, ?> chart) {
        ByteArrayOutputStream out = new ByteArrayOutputStream();
        try {
            VectorGraphicsEncoder.saveVectorGraphic(chart, out, VectorGraphicsEncoder.VectorGraphicsFormat.SVG);
        } catch (IOException e) {
            throw new UncheckedIOException("SVG encoding of chart failed", e);
        }
        return out.toString(StandardCharsets.UTF_8);
    }
}
