/**
 * Charts for notebooks and reports: static factories in {@link dev.rungbook.chart.Charts} that return XChart chart
 * objects (value histograms before and after quantization with the grid levels marked, per-channel ranges, error
 * versus bits per weight, loss curves, sensitivity heat maps, size-accuracy Pareto plots), one shared style, and
 * headless, atomic PNG and SVG output.
 */
package dev.rungbook.chart;
