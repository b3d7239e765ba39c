package scenario

import (
	"math"
	"math/rand/v2"
	"testing"
)

// The demo must show what heft is for: confounding (audited households
// differ from the others), a heterogeneous effect (ATT ≠ ATE) and a
// positivity problem (rows with e near 0 or 1). These checks are on the
// generator's own truth; they are properties of our invented scenario, not
// reference values.
func TestScenarioShowsTheProblems(t *testing.T) {
	r := rand.New(rand.NewPCG(1, 2))
	const n = 200000
	var sumTau, sumTauT, nt, below, above, priorT, priorC float64
	for i := 0; i < n; i++ {
		h := draw(r)
		sumTau += h.tau
		if h.t == 1 {
			nt++
			sumTauT += h.tau
			priorT += h.prior
		} else {
			priorC += h.prior
		}
		if h.e < 0.01 {
			below++
		}
		if h.e > 0.99 {
			above++
		}
	}
	ate, att := sumTau/n, sumTauT/nt
	share := nt / n
	if share < 0.15 || share > 0.6 {
		t.Errorf("treated share %.3f: want a sizeable treated arm", share)
	}
	if math.Abs(att-ate) < 100 {
		t.Errorf("ATT %.1f and ATE %.1f should differ by more than 100 kWh", att, ate)
	}
	if priorT/nt-priorC/(n-nt) < 1000 {
		t.Errorf("audited households should use more gas before: %.0f vs %.0f", priorT/nt, priorC/(n-nt))
	}
	if below/n < 0.005 || above/n < 0.001 {
		t.Errorf("want some rows near e=0 and e=1: %.4f below 0.01, %.4f above 0.99", below/n, above/n)
	}
	t.Logf("share treated %.3f, ATE %.1f, ATT %.1f, e<0.01 %.4f, e>0.99 %.4f", share, ate, att, below/n, above/n)
}
