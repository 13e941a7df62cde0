package dev.rungbook.chart;

import java.awt.BasicStroke;
import java.awt.Color;
import java.awt.Font;
import org.knowm.xchart.style.AxesChartStyler;
import org.knowm.xchart.style.HeatMapStyler;
import org.knowm.xchart.style.Styler;

/**
 * The one place that styles every Rungbook chart: white background, no plot or legend border, light grid, a
 * colour-blind-safe palette (the Okabe-Ito colours) and sans-serif fonts. Package-private: {@link Charts} applies it.
 */
final class ChartStyle {
    /** Series colours, in order of use. */
    static final Color BLUE = new Color(0x0072B2);
    static final Color ORANGE = new Color(0xE69F00);
    static final Color GREEN = new Color(0x009E73);
    static final Color VERMILLION = new Color(0xD55E00);
    static final Color PURPLE = new Color(0xCC79A7);
    static final Color SKY = new Color(0x56B4E9);
    static final Color YELLOW = new Color(0xF0E442);
    static final Color INK = new Color(0x222222);
    static final Color GRID = new Color(0xE6E6E6);
    static final Color MUTED = new Color(0x888888);

    static final Color[] PALETTE = {BLUE, ORANGE, GREEN, VERMILLION, PURPLE, SKY, INK, YELLOW};

    /** A translucent version of {@code c} for filled areas drawn over each other. */
    static Color translucent(Color c, int alpha) {
        return new Color(c.getRed(), c.getGreen(), c.getBlue(), alpha);
    }

    /** A thin dashed stroke, for reference lines such as grid levels. */
    static BasicStroke dashed(float width) {
        return new BasicStroke(width, BasicStroke.CAP_BUTT, BasicStroke.JOIN_MITER, 10f, new float[] {3f, 3f}, 0f);
    }

    /** A solid stroke of the given width. */
    static BasicStroke solid(float width) {
        return new BasicStroke(width, BasicStroke.CAP_ROUND, BasicStroke.JOIN_ROUND);
    }

    private ChartStyle() {
    }

    /** Applies the shared look to any chart's styler. */
    static void apply(Styler s) {
        String family = Font.SANS_SERIF;
        s.setBaseFont(new Font(family, Font.PLAIN, 12));
        s.setChartBackgroundColor(Color.WHITE);
        s.setChartFontColor(INK);
        s.setChartPadding(12);
        s.setChartTitleFont(new Font(family, Font.BOLD, 15));
        s.setChartTitleFontColor(INK);
        s.setChartTitleBoxVisible(false);
        s.setChartTitlePadding(8);
        s.setPlotBackgroundColor(Color.WHITE);
        s.setPlotBorderVisible(false);
        s.setLegendFont(new Font(family, Font.PLAIN, 11));
        s.setLegendBackgroundColor(new Color(255, 255, 255, 220));
        s.setLegendBorderColor(new Color(255, 255, 255, 0));
        s.setLegendPadding(6);
        // Heat maps accept only outside legends.
        s.setLegendPosition(s instanceof HeatMapStyler ? Styler.LegendPosition.OutsideE
                : Styler.LegendPosition.InsideNE);
        s.setSeriesColors(PALETTE);
        s.setMarkerSize(6);
        s.setAntiAlias(true);
        s.setTextAntiAlias(true);
        s.setAnnotationLineColor(MUTED);
        s.setAnnotationLineStroke(dashed(1f));
        if (s instanceof AxesChartStyler) {
            AxesChartStyler a = (AxesChartStyler) s;
            a.setAxisTitleFont(new Font(family, Font.PLAIN, 12));
            a.setAxisTickLabelsFont(new Font(family, Font.PLAIN, 11));
            a.setAxisTickLabelsColor(INK);
            a.setAxisTickMarksColor(MUTED);
            a.setAxisTickMarkLength(4);
            a.setAxisTickPadding(4);
            a.setAxisTitlePadding(8);
            a.setPlotGridLinesVisible(true);
            a.setPlotGridLinesColor(GRID);
            a.setPlotGridLinesStroke(new BasicStroke(1f));
            a.setPlotMargin(4);
            a.setXAxisMaxLabelCount(12);
            a.setXAxisTitleColor(INK);
            a.setYAxisTitleColor(INK);
        }
    }
}
