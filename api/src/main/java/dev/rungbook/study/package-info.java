/**
 * Studies: many quantizer specs run over many tensors, collected in one Tablesaw table
 * ({@link dev.rungbook.study.Study}, {@link dev.rungbook.study.StudyResult}).
 */
package dev.rungbook.study;
