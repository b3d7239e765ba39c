package score

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"

	"github.com/heft-project/heft/fit"
)

// sortedWeightQuantiles is WeightQuantiles as it was before the per-arm
// merge: every key's pooled weights, sorted, read by definition 7.
func sortedWeightQuantiles(e []float64, t []int8, shareTreated float64) map[string][]fit.Quantile {
	qs := QuantileGrid()
	out := map[string][]fit.Quantile{}
	for _, est := range Estimands {
		var w, ws []float64
		for i, ei := range e {
			if t[i] != 0 && t[i] != 1 {
				continue
			}
			v := Weight(est, t[i], ei)
			if math.IsNaN(v) || math.IsInf(v, 0) {
				continue
			}
			w = append(w, v)
			ws = append(ws, v*armShare(t[i], shareTreated))
		}
		if len(w) == 0 {
			continue
		}
		slices.Sort(w)
		slices.Sort(ws)
		out[est] = fit.QuantilesSorted(w, qs)
		out[StabilizedKey(est)] = fit.QuantilesSorted(ws, qs)
	}
	return out
}

// TestWeightQuantilesMerge compares the merged per-arm order with sorting
// the pooled weights, bit for bit, on random propensities with ties, exact
// 0 and 1, tiny e whose 1/e overflows, untreated rows and one-arm samples,
// and on the inputs that take the direct route (NaN, −0, e outside [0, 1]).
func TestWeightQuantilesMerge(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 12))
	gen := map[string]func() float64{
		"uniform": rng.Float64,
		"ties":    func() float64 { return float64(rng.IntN(9)) / 8 }, // includes 0 and 1
		"extreme": func() float64 {
			switch rng.IntN(6) {
			case 0:
				return 0
			case 1:
				return 1
			case 2:
				return 5e-324 // 1/e overflows to +Inf
			case 3:
				return math.Nextafter(1, 0)
			}
			return 1 / (1 + math.Exp(-8*rng.NormFloat64()))
		},
	}
	for name, g := range gen {
		for _, n := range []int{0, 1, 2, 7, 300, 5000} {
			for _, mix := range []int{0, 1, 2, 3} { // 0: both arms, 1: treated only, 2: control only, 3: with t = −1
				e := make([]float64, n)
				tr := make([]int8, n)
				for i := range e {
					e[i] = g()
					switch mix {
					case 0:
						tr[i] = int8(rng.IntN(2))
					case 1:
						tr[i] = 1
					case 3:
						tr[i] = int8(rng.IntN(3)) - 1
					}
				}
				for _, share := range []float64{0.3, 0, 1} {
					compareWeightQuantiles(t, name, e, tr, share)
				}
			}
		}
	}
	odd := []float64{0.2, math.NaN(), 0.7, math.Copysign(0, -1), -0.5, 1.5, 0.4}
	compareWeightQuantiles(t, "direct route", odd, []int8{1, 0, 1, 0, 0, 1, 0}, 0.5)
	compareWeightQuantiles(t, "share outside [0, 1]", []float64{0.2, 0.5, 0.7}, []int8{1, 0, 1}, 1.5)
}

func compareWeightQuantiles(t *testing.T, name string, e []float64, tr []int8, share float64) {
	t.Helper()
	got := WeightQuantiles(e, tr, share)
	want := sortedWeightQuantiles(e, tr, share)
	if len(got) != len(want) {
		t.Fatalf("%s n=%d share=%v: %d keys, sorting gives %d", name, len(e), share, len(got), len(want))
	}
	for key, w := range want {
		g := got[key]
		if len(g) != len(w) {
			t.Fatalf("%s n=%d %s: %d quantiles, want %d", name, len(e), key, len(g), len(w))
		}
		for i := range w {
			if g[i].Q != w[i].Q || math.Float64bits(g[i].Value) != math.Float64bits(w[i].Value) {
				t.Fatalf("%s n=%d share=%v %s q=%v: %v, sorting gives %v", name, len(e), share, key, w[i].Q, g[i].Value, w[i].Value)
			}
		}
	}
}
