package aggregate

import (
	"fmt"
	"math"

	"github.com/heft-project/heft/score"
)

// balance accumulates covariate balance per term and arm (0 control,
// 1 treated): unweighted and weighted moments and, when edges are given,
// weighted histograms on the term's fit-time decile edges for the
// Kolmogorov–Smirnov distance.
type balance struct {
	U [2][]Moments `json:"unweighted"`
	W [2][]Moments `json:"weighted"`
	// H[a][j][k] is Σw over arm a's rows whose term j falls in bin k:
	// bin k holds edges[k−1] < x ≤ edges[k] (see bin).
	H [2][][]Sum `json:"ks_hist,omitempty"`

	edges [][]float64 // per term; nil: no histograms
}

func newBalance(nterms int, edges [][]float64) *balance {
	b := &balance{edges: edges}
	for a := 0; a < 2; a++ {
		b.U[a] = make([]Moments, nterms)
		b.W[a] = make([]Moments, nterms)
		if edges != nil {
			b.H[a] = make([][]Sum, nterms)
			for j := range b.H[a] {
				b.H[a][j] = make([]Sum, len(edges[j])+1)
			}
		}
	}
	return b
}

// check reports whether a decoded balance has the shape of this one.
func (b *balance) check(nterms int) error {
	for a := 0; a < 2; a++ {
		if len(b.U[a]) != nterms || len(b.W[a]) != nterms {
			return fmt.Errorf("balance has %d/%d terms, the model %d", len(b.U[a]), len(b.W[a]), nterms)
		}
		if b.edges != nil {
			if len(b.H[a]) != nterms {
				return fmt.Errorf("balance histograms have %d terms, the model %d", len(b.H[a]), nterms)
			}
			for j := range b.H[a] {
				if len(b.H[a][j]) != len(b.edges[j])+1 {
					return fmt.Errorf("balance histogram of term %d has %d bins, the model %d", j+1, len(b.H[a][j]), len(b.edges[j])+1)
				}
			}
		}
	}
	return nil
}

// bin is the number of edges below x: with sorted edges e, x ≤ e[0] is bin
// 0, e[k−1] < x ≤ e[k] bin k, x > e[last] bin len(e). A linear scan: the
// edges are few (at most nine deciles).
func bin(edges []float64, x float64) int {
	k := 0
	for k < len(edges) && edges[k] < x {
		k++
	}
	return k
}

// maxDeciles is how many edges the fast binning handles: the distinct
// interior deciles are at most nine.
const maxDeciles = 9

// decileBins is the bins of a term with maxDeciles edges.
const decileBins = maxDeciles + 1

// deciles are up to nine sorted edges padded with +Inf, which no finite
// value exceeds, so that bin9 can count without a loop or branches.
type deciles [maxDeciles]float64

func padDeciles(edges []float64) (d deciles, ok bool) {
	if len(edges) > maxDeciles {
		return d, false
	}
	for k := range d {
		d[k] = math.Inf(1)
	}
	copy(d[:], edges)
	return d, true
}

func b2i(b bool) int {
	if b {
		return 1
	}
	return 0
}

// bin9 is bin for padded edges: the same count written out, which compiles
// to branch-free code (random data would mispredict the scan's exit).
func bin9(e *deciles, x float64) int {
	return b2i(e[0] < x) + b2i(e[1] < x) + b2i(e[2] < x) + b2i(e[3] < x) + b2i(e[4] < x) +
		b2i(e[5] < x) + b2i(e[6] < x) + b2i(e[7] < x) + b2i(e[8] < x)
}

// add folds one batch in. x[j] is term j+1 per row; rows and w as for
// armMoments; hist is scratch with room for the largest histogram. bt says
// which terms are 0/1 in this batch (nil: none), arm is the rows' treatment
// codes and sw the arms' Σw, which the 0/1 path needs.
func (b *balance) add(x [][]float64, rows *arms, w []float64, hist []float64, bt *binaryTerms, arm []int8, sw [2]float64) {
	var u, wt [2]Moments
	for j, col := range x {
		if bt != nil && bt.is[j] {
			b.addBinary(j, bt.ones[j], rows, arm, w, sw)
			continue
		}
		if b.edges == nil {
			armMoments(col, rows, w, &u, &wt)
			b.mergeMoments(j, &u, &wt)
			continue
		}
		e := b.edges[j]
		pad, fast := padDeciles(e)
		if fast && len(hist) >= 2*decileBins {
			// both arms' histograms binned in the moments' second pass
			h := [2][]float64{hist[:decileBins], hist[decileBins : 2*decileBins]}
			clear(hist[:2*decileBins])
			armMomentsHist(col, rows, w, &u, &wt, &pad, &h)
			b.mergeMoments(j, &u, &wt)
			for a := range h {
				for k, v := range h[a][:len(e)+1] {
					b.H[a][j][k].Add(v)
				}
			}
			continue
		}
		armMoments(col, rows, w, &u, &wt)
		b.mergeMoments(j, &u, &wt)
		for a, idx := range rows {
			h := hist[:len(e)+1]
			clear(h)
			if fast {
				for _, i := range idx {
					h[bin9(&pad, col[i])] += w[i]
				}
			} else {
				for _, i := range idx {
					h[bin(e, col[i])] += w[i]
				}
			}
			for k, v := range h {
				b.H[a][j][k].Add(v)
			}
		}
	}
}

func (b *balance) mergeMoments(j int, u, wt *[2]Moments) {
	for a := 0; a < 2; a++ {
		b.U[a][j].Merge(u[a])
		b.W[a][j].Merge(wt[a])
	}
}

// addBinary folds in term j, 0/1 in this batch with 1 on the rows ones:
// its moments from the count and weight of the ones per arm, and its
// histogram from two bins, those of 0 and of 1, holding Σw of the zeros
// (the arm's Σw less the ones') and of the ones.
func (b *balance) addBinary(j int, ones []int32, rows *arms, arm []int8, w []float64, sw [2]float64) {
	var c, s [3]float64 // by arm code + 1; code −1 (null) is dropped
	for _, i := range ones {
		a := arm[i] + 1
		c[a]++
		s[a] += w[i]
	}
	for a := 0; a < 2; a++ {
		u, wt := binaryMoments(float64(len(rows[a])), c[a+1], sw[a], s[a+1])
		b.U[a][j].Merge(u)
		b.W[a][j].Merge(wt)
		if b.edges == nil {
			continue
		}
		e := b.edges[j]
		k0, k1 := bin(e, 0), bin(e, 1)
		if k0 == k1 {
			b.H[a][j][k0].Add(sw[a])
			continue
		}
		b.H[a][j][k0].Add(max(sw[a]-s[a+1], 0))
		b.H[a][j][k1].Add(s[a+1])
	}
}

func (b *balance) merge(o *balance) {
	for a := 0; a < 2; a++ {
		for j := range b.U[a] {
			b.U[a][j].Merge(o.U[a][j])
			b.W[a][j].Merge(o.W[a][j])
		}
		for j := range b.H[a] {
			for k := range b.H[a][j] {
				b.H[a][j][k].Merge(o.H[a][j][k])
			}
		}
	}
}

// smdDenominator is D in SMD = (x̄_T − x̄_C)/D, from the arms' unweighted
// variances, following Austin & Stuart (2015, "Moving towards best practice
// when using inverse probability of treatment weighting (IPTW) using the
// propensity score to estimate causal treatment effects in observational
// studies", Stat. Med. 34(28)): sqrt((s²_T + s²_C)/2) for the ATE (and the
// overlap population), s_T for the ATT, s_C for the ATC.
func smdDenominator(estimand string, varT, varC float64) float64 {
	switch estimand {
	case score.ATT:
		return math.Sqrt(varT)
	case score.ATC:
		return math.Sqrt(varC)
	default:
		return math.Sqrt((varT + varC) / 2)
	}
}

// smd divides a mean difference by d. Where d is 0 (a term constant within
// the arms) it is 0 for equal means and ±Inf otherwise, so that a gate sees
// a term that separates the arms; these two are our convention.
func smd(diff, d float64) float64 {
	if d == 0 {
		if diff == 0 {
			return 0
		}
		return math.Inf(int(math.Copysign(1, diff)))
	}
	return diff / d
}

// termBalance is the balance of one term.
type termBalance struct {
	MeanT, MeanC, MeanTW, MeanCW float64
	VarT, VarC, VarTW, VarCW     float64
	SMD, SMDW, VarRatioW, KSW    float64
}

// term computes term j's balance for the estimand. The weighted variance
// ratio is s²_T,w/s²_C,w. The weighted Kolmogorov–Smirnov distance is
// max_k |F_T,w(e_k) − F_C,w(e_k)| over the term's edges, F the weighted
// empirical distribution function; for a 0/1 term with an edge in [0, 1)
// it is |p_T,w − p_C,w|. NaN when undefined.
func (b *balance) term(j int, estimand string) termBalance {
	uT, uC := b.U[1][j], b.U[0][j]
	wT, wC := b.W[1][j], b.W[0][j]
	r := termBalance{
		MeanT: uT.Mean, MeanC: uC.Mean, MeanTW: wT.Mean, MeanCW: wC.Mean,
		VarT: uT.SampleVar(), VarC: uC.SampleVar(), VarTW: wT.WeightedVar(), VarCW: wC.WeightedVar(),
	}
	if uT.W == 0 || uC.W == 0 {
		r.MeanT, r.MeanC = nanIfEmpty(uT, r.MeanT), nanIfEmpty(uC, r.MeanC)
	}
	r.MeanTW, r.MeanCW = nanIfEmpty(wT, r.MeanTW), nanIfEmpty(wC, r.MeanCW)
	d := smdDenominator(estimand, r.VarT, r.VarC)
	r.SMD = smd(r.MeanT-r.MeanC, d)
	r.SMDW = smd(r.MeanTW-r.MeanCW, d)
	r.VarRatioW = math.NaN()
	if r.VarCW > 0 {
		r.VarRatioW = r.VarTW / r.VarCW
	}
	r.KSW = math.NaN()
	if b.edges != nil && wT.W > 0 && wC.W > 0 {
		r.KSW = 0
		hT, hC := b.H[1][j], b.H[0][j]
		var totT, totC float64
		for k := range hT {
			totT += hT[k].Value()
			totC += hC[k].Value()
		}
		var fT, fC float64
		for k := 0; k < len(b.edges[j]); k++ {
			fT += hT[k].Value()
			fC += hC[k].Value()
			if ks := math.Abs(fT/totT - fC/totC); ks > r.KSW {
				r.KSW = ks
			}
		}
	}
	return r
}

func nanIfEmpty(m Moments, v float64) float64 {
	if m.W == 0 {
		return math.NaN()
	}
	return v
}
