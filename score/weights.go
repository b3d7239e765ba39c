package score

import (
	"fmt"
	"math"
	"sort"

	"github.com/heft-project/heft/fit"
)

// Weight returns the weight of a row with treatment t (1 treated, 0 control)
// and propensity e for an estimand:
//
//	ATE:     T/e + (1−T)/(1−e)        (Horvitz & Thompson 1952; Rosenbaum & Rubin 1983)
//	ATT:     T + (1−T)·e/(1−e)        (Hirano, Imbens & Ridder 2003; Sato & Matsuyama 2003)
//	ATC:     T·(1−e)/e + (1−T)        (the mirror image of ATT)
//	overlap: T·(1−e) + (1−T)·e        (Li, Morgan & Zaslavsky 2018)
//
// It returns NaN for an unknown estimand or a t other than 0 or 1, and ±Inf
// where the formula divides by zero (e = 0 or 1): the Scorer never lets that
// happen, see the policy order in scorer.go.
func Weight(estimand string, t int8, e float64) float64 {
	k, ok := estimandKind(estimand)
	if !ok {
		return math.NaN()
	}
	return weightOf(k, t, e)
}

// kind is an estimand as a small integer, so the hot loop switches on an
// int rather than comparing strings.
type kind uint8

const (
	kindATE kind = iota
	kindATT
	kindATC
	kindOverlap
)

func estimandKind(estimand string) (kind, bool) {
	switch estimand {
	case ATE:
		return kindATE, true
	case ATT:
		return kindATT, true
	case ATC:
		return kindATC, true
	case Overlap:
		return kindOverlap, true
	}
	return 0, false
}

func weightOf(k kind, t int8, e float64) float64 {
	switch t {
	case 1:
		switch k {
		case kindATE:
			return 1 / e
		case kindATT:
			return 1
		case kindATC:
			return (1 - e) / e
		case kindOverlap:
			return 1 - e
		}
	case 0:
		switch k {
		case kindATE:
			return 1 / (1 - e)
		case kindATT:
			return e / (1 - e)
		case kindATC:
			return 1
		case kindOverlap:
			return e
		}
	}
	return math.NaN()
}

// QuantileGrid returns the q grid of WeightQuantiles: 0, 0.005, …, 1 plus
// 0.999, 0.9995 and 0.9999, sorted. The extra points give the far tail,
// where truncation caps usually sit, more resolution than the 0.005 steps.
func QuantileGrid() []float64 {
	qs := make([]float64, 0, 204)
	for i := 0; i <= 200; i++ {
		qs = append(qs, float64(i)/200)
	}
	qs = append(qs, 0.999, 0.9995, 0.9999)
	sort.Float64s(qs)
	return qs
}

// WeightQuantiles computes the fit sample's weight quantiles for every
// estimand, with and without stabilization (keys "ate", "ate/stabilized",
// …), on QuantileGrid, as type-7 quantiles (Hyndman & Fan 1996; fit.Quantiles).
// Weights come from the unclipped propensities e; rows with t = −1 and rows
// whose weight is not finite (e exactly 0 or 1) are left out, because an
// infinite quantile cannot be stored in JSON nor serve as a cap. A key whose
// estimand has no usable row is omitted. e and t have the same length.
func WeightQuantiles(e []float64, t []int8, shareTreated float64) map[string][]fit.Quantile {
	qs := QuantileGrid()
	out := make(map[string][]fit.Quantile, 2*len(Estimands))
	w := make([]float64, 0, len(e))
	ws := make([]float64, 0, len(e))
	for _, est := range Estimands {
		k, _ := estimandKind(est)
		w, ws = w[:0], ws[:0]
		for i, ei := range e {
			ti := t[i]
			if ti != 0 && ti != 1 {
				continue
			}
			v := weightOf(k, ti, ei)
			if math.IsNaN(v) || math.IsInf(v, 0) {
				continue
			}
			w = append(w, v)
			ws = append(ws, v*armShare(ti, shareTreated))
		}
		if len(w) == 0 {
			continue
		}
		out[est] = fit.Quantiles(w, qs)
		out[StabilizedKey(est)] = fit.Quantiles(ws, qs)
	}
	return out
}

// armShare is the numerator of a stabilized weight: the marginal share of
// the row's arm (Robins, Hernán & Brumback 2000).
func armShare(t int8, shareTreated float64) float64 {
	if t == 1 {
		return shareTreated
	}
	return 1 - shareTreated
}

// Validate checks a Policy, naming the command-line flag at fault.
func (p Policy) Validate() error {
	if _, ok := estimandKind(p.Estimand); !ok {
		return fmt.Errorf("--estimand %q: unknown estimand (want one of %s, %s, %s, %s)", p.Estimand, ATE, ATT, ATC, Overlap)
	}
	if !(p.Clip >= 0 && p.Clip < 0.5) {
		return fmt.Errorf("--clip %v: must be at least 0 and below 0.5 (propensities are bounded to [ε, 1−ε])", p.Clip)
	}
	if !(p.Trim >= 0 && p.Trim < 0.5) {
		return fmt.Errorf("--trim %v: must be at least 0 and below 0.5 (rows with e outside [α, 1−α] get weight 0)", p.Trim)
	}
	if !(p.TruncateQ >= 0 && p.TruncateQ <= 1) {
		return fmt.Errorf("--truncate-quantile %v: must be between 0 and 1", p.TruncateQ)
	}
	if !(p.Cap >= 0) || math.IsInf(p.Cap, 0) {
		return fmt.Errorf("weight cap %v: must be finite and not negative", p.Cap)
	}
	return nil
}
