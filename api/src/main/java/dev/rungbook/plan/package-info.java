/**
 * Mixed-precision planning: how sensitive each layer is to each candidate quantizer
 * ({@link dev.rungbook.plan.Sensitivity}), the cheapest-in-error choice of one candidate per layer under a byte
 * budget ({@link dev.rungbook.plan.BitBudget}), and the chosen {@link dev.rungbook.plan.Plan}, which is stored as a
 * small JSON file and applied to a network or to a checkpoint's tensors.
 */
package dev.rungbook.plan;
