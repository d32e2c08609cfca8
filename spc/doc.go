// Package spc holds the statistical process control used on a clinic's QA
// history: the individuals and moving-range chart (I-chart), the action
// limit of AAPM TG-218, and the Western Electric run rules. It is pure
// arithmetic on time-ordered values; the results store (package record)
// supplies the values and package trend draws and tabulates them.
//
// # Individuals chart
//
// For values x_1 … x_n in time order (n ≥ 2) the moving ranges are
// MR_i = |x_i − x_{i−1}| (i = 2 … n), and with x̄ their mean and mR̄ the
// mean moving range:
//
//	centre line  x̄
//	σ̂            mR̄ / d2,   d2 = 1.128 (the d2 constant for ranges of two)
//	UCL, LCL     x̄ ± 3·σ̂ = x̄ ± 2.660·mR̄
//
// as in the NIST/SEMATECH e-Handbook of Statistical Methods, section 6.3.2.2
// "Individuals Control Charts" (the tests check its flow-rate example).
// TG-218 quotes the same lower limit as x̄ − 2.660·mR̄.
//
// # TG-218 action limit
//
// AAPM TG-218 (Miften et al., Med Phys 45 (2018) e53) sets a process-based
// action limit from the process mean x̄ and standard deviation σ relative to
// the target T: the width of the acceptable interval is
//
//	ΔA = β·√(σ² + (x̄ − T)²),   β = 6, T = 100 %,
//
// and the lower action limit is T − ΔA/2. The formula, β and T are quoted
// from memory (the report's text could not be consulted when this was
// written). It agrees with its origin: the process capability index
// C_pm = (USL − LSL) / (6·√(σ² + (μ − T)²)) of Chan, Cheng and Spiring
// (J Qual Technol 20 (1988) 162, from memory) set to 1, as Sanghangthum et
// al. propose for action limits (Phys Med Biol 58 (2013) 7025), gives
// USL − LSL = ΔA with β = 6, an interval centred on T. σ is taken as the
// sample standard deviation (n − 1) of the values.
//
// # Western Electric rules
//
// The four zone rules of the Western Electric Company's Statistical
// Quality Control Handbook (1956), with σ̂ the I-chart's sigma:
//
//	rule 1: one point beyond 3σ̂ from the centre line;
//	rule 2: two of three consecutive points beyond 2σ̂, on the same side;
//	rule 3: four of five consecutive points beyond 1σ̂, on the same side;
//	rule 4: eight consecutive points on the same side of the centre line.
//
// A point is flagged for a rule when the rule's pattern is complete at that
// point and the point itself is part of it (beyond the zone, on the side),
// so the flags mark where each signal occurs. A point on the centre line
// is on neither side.
package spc
