/**
 * Quantizer specs and their results. {@link dev.rungbook.quant.Quantizer} is an immutable, fluent description of a
 * grid (linear integer, low-bit float, MX block formats, NF4, logarithmic, fitted codebook, binary, ternary), its
 * {@link dev.rungbook.quant.Granularity}, its {@link dev.rungbook.range.RangeRule} and its
 * {@link dev.rungbook.round.Rounding}; {@link dev.rungbook.quant.Quantizer#apply} turns a tensor into a
 * {@link dev.rungbook.quant.Quantized} with codes, scales, zero points, the dequantized tensor, size accounting and
 * an error report.
 */
package dev.rungbook.quant;
