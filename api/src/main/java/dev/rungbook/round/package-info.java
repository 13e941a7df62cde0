/**
 * Rounding rules: how a value already divided by its scale (and shifted by its zero point) becomes an integer code.
 *
 * <p>Two kinds of rule implement {@link dev.rungbook.round.Rounding}:
 * <ul>
 *   <li>{@link dev.rungbook.round.ElementRounding}: one value at a time ({@link dev.rungbook.round.Rounding#nearest()},
 *       ties away, floor, ceil, {@link dev.rungbook.round.Rounding#stochastic(long) stochastic}, and user rules given as
 *       a lambda through {@link dev.rungbook.round.Rounding#custom}).</li>
 *   <li>{@link dev.rungbook.round.LayerRounding}: the whole weight tensor at once, given the grid each element sits on
 *       ({@link dev.rungbook.round.GridAssignment}); learned rules that use calibration inputs are of this kind.</li>
 * </ul>
 */
package dev.rungbook.round;
