package score

import (
	"fmt"
	"math"
	"runtime"
	"sort"
	"sync"
	"sync/atomic"

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
//
// Within an arm each weight is a monotone function of e on [0, 1] (1/e and
// (1−e)/e and 1−e fall, 1/(1−e), e/(1−e) and e rise, 1 is constant), and
// stays monotone in floating point because IEEE 754 subtraction, division
// and multiplication by the stabilizing share are correctly rounded, and
// rounding is monotone. So e is sorted once per arm and each key's pooled
// sorted weights come from an O(n) merge of the two arms, walking an arm
// backwards where its weight falls; the values are those of sorting the
// pooled weights, to the bit. Keys are computed on GOMAXPROCS goroutines,
// each into its own slots. Inputs outside that case (e outside [+0, 1] or
// NaN, a share outside [0, 1]) take the direct route of sorting every key.
// The arms are sorted by fit.SortedArms.
func WeightQuantiles(e []float64, t []int8, shareTreated float64) map[string][]fit.Quantile {
	e1, e0, ok := fit.SortedArms(e, t)
	if !ok || !(shareTreated >= 0 && shareTreated <= 1) {
		return weightQuantilesPooled(e, t, shareTreated)
	}
	qs := QuantileGrid()
	type job struct {
		k    kind
		stab bool
		key  string
	}
	jobs := make([]job, 0, 2*len(Estimands))
	for _, est := range Estimands {
		k, _ := estimandKind(est)
		jobs = append(jobs, job{k, false, est}, job{k, true, StabilizedKey(est)})
	}
	res := make([][]fit.Quantile, len(jobs))
	var next atomic.Int64
	var wg sync.WaitGroup
	for range min(runtime.GOMAXPROCS(0), len(jobs)) {
		wg.Go(func() {
			buf := make([]float64, len(e1)+len(e0))
			for {
				i := int(next.Add(1) - 1)
				if i >= len(jobs) {
					return
				}
				s1, s0 := 1.0, 1.0
				if jobs[i].stab {
					s1, s0 = armShare(1, shareTreated), armShare(0, shareTreated)
				}
				w := pooledWeights(buf, jobs[i].k, jobs[i].stab, e1, e0, s1, s0)
				res[i] = fit.QuantilesSorted(w, qs)
			}
		})
	}
	wg.Wait()
	out := make(map[string][]fit.Quantile, len(jobs))
	for i, j := range jobs {
		if res[i] != nil {
			out[j.key] = res[i]
		}
	}
	return out
}

// falls reports whether the weight of arm t decreases in e.
func falls(k kind, t int8) bool {
	if t == 1 {
		return k == kindATE || k == kindATC || k == kindOverlap
	}
	return false
}

// pooledWeights writes into dst (len(e1)+len(e0) long) the finite weights
// of both arms, ascending, and returns them; stab multiplies arm t's
// weights by s1 or s0. The treated weights are laid out ascending from
// dst[len(e0)] and merged with the control weights, made on the fly, from
// dst[0]: the write position i+j never passes the unread treated weight at
// len(e0)+i because j ≤ len(e0).
func pooledWeights(dst []float64, k kind, stab bool, e1, e0 []float64, s1, s0 float64) []float64 {
	off := len(e0)
	m1 := 0
	for idx := range e1 {
		if falls(k, 1) {
			idx = len(e1) - 1 - idx
		}
		v := weightOf(k, 1, e1[idx])
		if math.IsNaN(v) || math.IsInf(v, 0) {
			continue
		}
		if stab {
			v *= s1
		}
		dst[off+m1] = v
		m1++
	}
	a := dst[off : off+m1]
	out := dst[:0]
	i := 0
	for idx := range e0 {
		if falls(k, 0) {
			idx = len(e0) - 1 - idx
		}
		v := weightOf(k, 0, e0[idx])
		if math.IsNaN(v) || math.IsInf(v, 0) {
			continue
		}
		if stab {
			v *= s0
		}
		for i < len(a) && a[i] <= v {
			out = append(out, a[i])
			i++
		}
		out = append(out, v)
	}
	for ; i < len(a); i++ {
		out = append(out, a[i])
	}
	return out
}

// weightQuantilesPooled is WeightQuantiles by computing and sorting every
// key's pooled weights, for inputs where the weights need not be monotone.
func weightQuantilesPooled(e []float64, t []int8, shareTreated float64) map[string][]fit.Quantile {
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
