/**
 * Range rules: how the clipping range {@code [lo, hi]} of a channel, group or tensor is chosen before its scale and
 * zero point are derived (min-max, running average over batches, percentile, MSE-optimal clipping, entropy
 * calibration, analytic Laplace/Gaussian clipping, or a fixed range).
 */
package dev.rungbook.range;
