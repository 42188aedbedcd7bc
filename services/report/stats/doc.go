// Package stats holds the statistics of the rates and efficiency report:
// weighted counts and the rate errors drawn from them, the regularized
// incomplete beta function and its inverse, Clopper-Pearson intervals for
// efficiencies, and the error-function fit of a turn-on curve.
//
// Everything here is pure and deterministic: the same input always gives
// the same bits, whatever the machine's number of cores.
package stats
