package dev.rungbook.render;

import dev.rungbook.chart.Charts;
import java.awt.image.BufferedImage;
import java.io.ByteArrayOutputStream;
import java.io.IOException;
import java.io.UncheckedIOException;
import java.util.Base64;
import java.util.Map;
import java.util.concurrent.CompletableFuture;
import java.util.concurrent.CompletionException;
import java.util.concurrent.Executor;
import java.util.concurrent.Executors;
import javax.imageio.ImageIO;
import org.knowm.xchart.internal.chartpart.Chart;

/**
 * XChart charts to {@code image/png} drawn at {@link #SCALE} times the chart's size (sharp on high-density screens;
 * the metadata asks the front end to show it at the chart's own size) and to {@code image/svg+xml}, through the
 * api's {@link Charts} encoders.
 *
 * <p>An XChart chart must not be painted by two threads at once (its axis state is shared), so the PNG is painted
 * first; its (slower) PNG compression then runs while the SVG is painted on a second thread.
 */
public final class ChartRenderer {
    /** Pixel density of the PNG relative to the chart's size. */
    public static final int SCALE = 2;
    /** One daemon thread drawing the SVG while the caller compresses the PNG. */
    private static final Executor ENCODER = Executors.newSingleThreadExecutor(r -> {
        Thread t = new Thread(r, "rungbook-chart-svg");
        t.setDaemon(true);
        return t;
    });

    private ChartRenderer() {
    }

    /** Renders {@code chart} as PNG, SVG and a one-line description. */
    public static MimeBundle render(Chart<?, ?> chart) {
        int w = chart.getWidth();
        int h = chart.getHeight();
        String title = chart.getTitle() == null || chart.getTitle().isBlank() ? "" : " \"" + chart.getTitle() + "\"";
        BufferedImage image = Charts.toImage(chart, SCALE);
        CompletableFuture<String> svg = CompletableFuture.supplyAsync(() -> Charts.toSvgString(chart), ENCODER);
        String png = Base64.getEncoder().encodeToString(encodePng(image));
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
        return Charts.toPngBytes(chart, scale);
    }

    /** SVG text of the chart. */
    public static String svg(Chart<?, ?> chart) {
        return Charts.toSvgString(chart);
    }

    private static byte[] encodePng(BufferedImage image) {
        ByteArrayOutputStream out = new ByteArrayOutputStream();
        try {
            ImageIO.write(image, "png", out);
        } catch (IOException e) {
            throw new UncheckedIOException("PNG encoding of chart failed", e);
        }
        return out.toByteArray();
    }
}
