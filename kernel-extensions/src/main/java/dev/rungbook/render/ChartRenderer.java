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
import java.util.concurrent.CompletableFuture;
import java.util.concurrent.CompletionException;
import java.util.concurrent.Executor;
import java.util.concurrent.Executors;
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
    /** One daemon thread drawing the SVG while the caller draws the PNG. */
    private static final Executor ENCODER = Executors.newSingleThreadExecutor(r -> {
        Thread t = new Thread(r, "rungbook-chart-svg");
        t.setDaemon(true);
        return t;
    });

    private ChartRenderer() {
    }

    /** Renders {@code chart} as PNG, SVG (drawn in parallel on the two encoders) and a one-line description. */
    public static MimeBundle render(Chart<?, ?> chart) {
        int w = chart.getWidth();
        int h = chart.getHeight();
        String title = chart.getTitle() == null || chart.getTitle().isBlank() ? "" : " \"" + chart.getTitle() + "\"";
        CompletableFuture<String> svg = CompletableFuture.supplyAsync(() -> svg(chart), ENCODER);
        String png = Base64.getEncoder().encodeToString(png(chart, SCALE));
        String svgText;
        try {
            svgText = svg.join();
        } catch (CompletionException e) {
            throw e.getCause() instanceof RuntimeException r ? r : e;
        }
        return MimeBundle.text(chart.getClass().getSimpleName() + title + " (" + w + "x" + h + ")")
                .with(MimeBundle.PNG, png)
                .withMetadata(MimeBundle.PNG, Map.of("width", w, "height", h))
                .with(MimeBundle.SVG, svgText);
    }

    /** PNG bytes of the chart drawn at {@code scale} times its size. */
    public static byte[] png(Chart<?, ?> chart, int scale) {
        int w = chart.getWidth();
        int h = chart.getHeight();
        BufferedImage image = new BufferedImage(w * scale, h * scale, BufferedImage.TYPE_INT_RGB);
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

    /**
     * SVG text of the chart. (XChart 4.0.3 marks its stream variant deprecated in favour of writing files; the
     * stream variant is kept so that no temporary file is needed.)
     */
    @SuppressWarnings("deprecation")
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
