// Package aggregate turns scored batches into a run's report in constant
// memory: counts, weight sums and Kish effective sample sizes, covariate
// balance per term (moments, SMD, variance ratio, weighted KS), overlap
// (propensity histograms, rows near 0 and 1, the largest weights), drift
// since the fit (PSI, mean shifts, unseen levels), per-segment estimates
// and a gate that fails a run whose thresholds are not met.
//
// Everything is held in a State whose parts are sums or exactly mergeable
// summaries: Neumaier-compensated sums (sum.go), pairwise-merged moments
// (moments.go), histograms on edges fixed at fit, and top-k lists. So the
// table can be split any way, each part accumulated on its own machine,
// and the state files merged in any order into the single-pass answer;
// a property test checks this to relative 1e-12.
//
// The effect estimates and their standard errors are computed by Effects
// (effects.go), which the State embeds for the whole run and each segment.
// The report's JSON form is versioned and documented in schema.md.
package aggregate
