package dev.rungbook.install;

import java.awt.BasicStroke;
import java.awt.Color;
import java.awt.Graphics2D;
import java.awt.RenderingHints;
import java.awt.geom.RoundRectangle2D;
import java.awt.image.BufferedImage;
import java.io.ByteArrayOutputStream;
import java.io.IOException;
import java.io.UncheckedIOException;
import javax.imageio.ImageIO;

/** The Rungbook logo, drawn in code: a ladder (two rails, four rungs) on a rounded teal square. */
public final class Logo {
    private Logo() {
    }

    /** The logo as a {@code size}x{@code size} PNG. */
    public static byte[] png(int size) {
        if (size < 8 || size > 1024) {
            throw new IllegalArgumentException("logo size " + size + " is outside 8..1024 pixels");
        }
        BufferedImage img = new BufferedImage(size, size, BufferedImage.TYPE_INT_ARGB);
        Graphics2D g = img.createGraphics();
        try {
            g.setRenderingHint(RenderingHints.KEY_ANTIALIASING, RenderingHints.VALUE_ANTIALIAS_ON);
            float s = size;
            g.setColor(new Color(0x0F, 0x6E, 0x74));
            g.fill(new RoundRectangle2D.Float(0, 0, s, s, s * 0.3f, s * 0.3f));
            g.setColor(Color.WHITE);
            g.setStroke(new BasicStroke(Math.max(1.5f, s * 0.08f), BasicStroke.CAP_ROUND, BasicStroke.JOIN_ROUND));
            float left = s * 0.3f;
            float right = s * 0.7f;
            g.drawLine(Math.round(left), Math.round(s * 0.15f), Math.round(left), Math.round(s * 0.85f));
            g.drawLine(Math.round(right), Math.round(s * 0.15f), Math.round(right), Math.round(s * 0.85f));
            for (int i = 0; i < 4; i++) {
                int y = Math.round(s * (0.27f + i * 0.155f));
                g.drawLine(Math.round(left), y, Math.round(right), y);
            }
        } finally {
            g.dispose();
        }
        ByteArrayOutputStream out = new ByteArrayOutputStream();
        try {
            ImageIO.write(img, "png", out);
        } catch (IOException e) {
            throw new UncheckedIOException("PNG encoding of the logo failed", e);
        }
        return out.toByteArray();
    }
}
