/**
 * Internal kernels and helpers. <strong>Not public API</strong>: anything here may change without notice. Other
 * packages of Rungbook use these classes; user code should not.
 */
package dev.rungbook.internal;
