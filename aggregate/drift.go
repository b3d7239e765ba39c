package aggregate

import (
	"fmt"
	"math"
)

// psiFloor replaces an empty bin's share in the population stability
// index, which is undefined for a zero share. 1e-6 is common practice with
// no published source.
const psiFloor = 1e-6

// drift accumulates this run's propensity distribution on the fit sample's
// decile bins, the expected distribution for the population stability index.
type drift struct {
	// Counts[k] are rows (both arms) in bin k of the deciles d:
	// e ≤ d[0] is bin 0, d[k−1] < e ≤ d[k] bin k, e > d[last] bin len(d).
	Counts []int64 `json:"decile_counts"`

	deciles []float64
}

func newDrift(deciles []float64) *drift {
	return &drift{Counts: make([]int64, len(deciles)+1), deciles: deciles}
}

func (d *drift) check() error {
	if len(d.Counts) != len(d.deciles)+1 {
		return fmt.Errorf("drift has %d decile bins, the model %d", len(d.Counts), len(d.deciles)+1)
	}
	return nil
}

func (d *drift) add(e []float64, rows *arms) {
	pad, fast := padDeciles(d.deciles)
	for _, idx := range rows {
		for _, i := range idx {
			if fast {
				d.Counts[bin9(&pad, e[i])]++
			} else {
				d.Counts[bin(d.deciles, e[i])]++
			}
		}
	}
}

func (d *drift) merge(o *drift) {
	for k := range d.Counts {
		d.Counts[k] += o.Counts[k]
	}
}

// psi is the population stability index of the observed bin counts against
// the expected ones (Yurdakul 2018, "Statistical properties of population
// stability index", PhD thesis, Western Michigan University):
//
//	PSI = Σ_k (a_k − f_k)·ln(a_k/f_k)
//
// with a and f the observed and expected shares, each floored at psiFloor.
// NaN when either side has no rows or the bins do not match.
func psi(observed []int64, expected []float64) float64 {
	if len(observed) != len(expected) || len(observed) < 2 {
		return math.NaN()
	}
	var no, ne float64
	for k := range observed {
		no += float64(observed[k])
		ne += expected[k]
	}
	if no <= 0 || ne <= 0 {
		return math.NaN()
	}
	var s float64
	for k := range observed {
		a := max(float64(observed[k])/no, psiFloor)
		f := max(expected[k]/ne, psiFloor)
		s += (a - f) * math.Log(a/f)
	}
	return s
}

// meanShift is (x̄_now − x̄_fit)/sd_fit, the term's mean shift in fit-sample
// standard deviations; NaN when sd_fit is not positive.
func meanShift(now, fitMean, fitSD float64) float64 {
	if !(fitSD > 0) {
		return math.NaN()
	}
	return (now - fitMean) / fitSD
}
