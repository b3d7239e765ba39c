package score

import (
	"fmt"
	"sort"

	"github.com/heft-project/heft/fit"
)

// StabilizedKey is the Reference.WeightQuantiles key of an estimand's
// stabilized weights.
func StabilizedKey(estimand string) string { return estimand + "/stabilized" }

// Resolve returns p with Cap set from the model's fit-sample weight
// quantiles for TruncateQ (key Estimand, or Estimand+"/stabilized" when
// Stabilize), interpolated linearly in q between grid points, so every
// partition scored with the same model gets the same cap. With TruncateQ = 0
// it returns p unchanged.
func (p Policy) Resolve(m *fit.Model) (Policy, error) {
	if err := p.Validate(); err != nil {
		return p, err
	}
	if p.TruncateQ == 0 {
		return p, nil
	}
	key := p.Estimand
	if p.Stabilize {
		key = StabilizedKey(key)
	}
	qs := m.Reference.WeightQuantiles[key]
	if len(qs) == 0 {
		return p, fmt.Errorf("--truncate-quantile %v: the model file has no %q weight quantiles (refit with this version of heft)", p.TruncateQ, key)
	}
	c, err := interpolate(qs, p.TruncateQ)
	if err != nil {
		return p, fmt.Errorf("--truncate-quantile %v: model weight quantiles %q: %w", p.TruncateQ, key, err)
	}
	p.Cap = c
	return p, nil
}

// interpolate evaluates the piecewise-linear function through the points
// (Q, Value), which must have increasing Q, at q inside their range.
func interpolate(qs []fit.Quantile, q float64) (float64, error) {
	for i := 1; i < len(qs); i++ {
		if !(qs[i].Q > qs[i-1].Q) {
			return 0, fmt.Errorf("q values not increasing at %v", qs[i].Q)
		}
	}
	lo, hi := qs[0], qs[len(qs)-1]
	if q < lo.Q || q > hi.Q {
		return 0, fmt.Errorf("%v is outside the stored range [%v, %v]", q, lo.Q, hi.Q)
	}
	j := sort.Search(len(qs), func(i int) bool { return qs[i].Q >= q })
	if qs[j].Q == q {
		return qs[j].Value, nil
	}
	a, b := qs[j-1], qs[j]
	f := (q - a.Q) / (b.Q - a.Q)
	return a.Value + f*(b.Value-a.Value), nil
}
