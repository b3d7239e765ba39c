package aggregate

import (
	"gonum.org/v1/gonum/floats"

	"github.com/heft-project/heft/score"
)

// Gradient series. Within one arm the nSlots gradient slots per row are
// signed copies of a few series: for a treated row ∂(Y/e)/∂e = −Y/e² is the
// derivative of IPW ATE's ψ, of IPW ATC's and of Hájek ATE's and ATC's wTY;
// for a control row the slots use the same names with 1−e in place of e.
// So each row stores nSeries values for its own arm, a block sums
// Σ x_j·series per arm and term, and every slot is ±(treated series sum)
// ± (control series sum), as slotSources lists. With ge = e(1−e) (0 where
// clipped), g₁, g₀ the outcome links' derivatives (1, or μ(1−μ) for a
// logistic model), and treated / control values:
const (
	sE0 = iota // ge·Y/e²          ge·Y/(1−e)²
	sE1        // ge/e²            ge/(1−e)²
	sE2        // ge·Y             (both arms)
	sE3        // ge
	sR0        // ge·dw·Y, dw the derivative in e of the run's written weight
	sR1        // ge·dw
	sE4        // ge·(Y−μ₁)/e²     ge·(Y−μ₀)/(1−e)²
	sE5        // ge·(1−2e)(μ₁−μ₀)
	sE6        // ge·(1−2e)
	sE7        // ge·(Y−μ₁)        ge·(Y−μ₀)
	sF0        // g₁·(1−e)/e       g₁
	sF1        // g₁·e(1−e)
	sF2        // g₁·(1−e)         0
	sG0        // g₀               g₀·e/(1−e)
	sG1        // g₀·e(1−e)
	sG2        // 0                g₀·e
	nSeries
)

// The sums over the ones in block are written out for 16 series.
var _ = [1]int{}[nSeries-16]

// nSeriesAugFree is the number of leading series that need no outcome
// models; the slots below nAugFree use only these.
const nSeriesAugFree = sE4

// src is one arm's share of a slot: sign·series k, none for k < 0.
type src struct {
	k    int8
	sign float64
}

// slotSources lists per slot its control (index 0) and treated (1) source,
// following the per-row derivatives of the type doc of Effects: e.g. IPW
// ATE's ψ = Y/e for a treated row has ∂ψ/∂e = −Y/e², −sE0, and for a
// control row ψ = −Y/(1−e) has −Y/(1−e)², again −sE0. run is the run's
// estimand, whose Hájek block uses the written weight (sR0, sR1).
func slotSources(run string) (m [nSlots][2]src) {
	none := src{k: -1}
	pos := func(k int) src { return src{int8(k), 1} }
	neg := func(k int) src { return src{int8(k), -1} }
	set := func(si int, control, treated src) { m[si] = [2]src{control, treated} }
	set(0, neg(sE0), neg(sE0)) // IPW ATE ψ
	set(1, neg(sE0), none)     // IPW ATT ψ: dw = 0 for treated rows
	set(2, none, neg(sE0))     // IPW ATC ψ: dw = 0 for control rows
	// Hájek (wTY, wT, w(1−T)Y, w(1−T)): the first two are treated rows',
	// the last two control rows'; dw is −1/e², 0, −1/e², −1 for treated rows
	// and 1/(1−e)², 1/(1−e)², 0, 1 for control rows, by estimand.
	for b, est := range []string{score.ATE, score.ATT, score.ATC, score.Overlap} {
		var t0, t1, c0, c1 src
		switch est {
		case score.ATE:
			t0, t1, c0, c1 = neg(sE0), neg(sE1), pos(sE0), pos(sE1)
		case score.ATT:
			t0, t1, c0, c1 = none, none, pos(sE0), pos(sE1)
		case score.ATC:
			t0, t1, c0, c1 = neg(sE0), neg(sE1), none, none
		default:
			t0, t1, c0, c1 = neg(sE2), neg(sE3), pos(sE2), pos(sE3)
		}
		if est == run {
			t0, t1, c0, c1 = pos(sR0), pos(sR1), pos(sR0), pos(sR1)
		}
		si := 3 + 4*b
		set(si, none, t0)
		set(si+1, none, t1)
		set(si+2, c0, none)
		set(si+3, c1, none)
	}
	set(19, neg(sE4), neg(sE4)) // AIPW ATE ψ
	set(20, neg(sE4), none)     // AIPW ATT ψ
	set(21, none, neg(sE4))     // AIPW ATC ψ
	set(22, pos(sE5), pos(sE5)) // overlap h(μ₁−μ₀)
	set(23, pos(sE6), pos(sE6)) // h
	set(24, none, neg(sE7))     // T(1−e)(Y−μ₁)
	set(25, none, neg(sE3))     // T(1−e)
	set(26, pos(sE7), none)     // (1−T)e(Y−μ₀)
	set(27, pos(sE3), none)     // (1−T)e
	set(28, pos(sF0), neg(sF0)) // AIPW ATE ψ in γ₁: 1 − T/e
	set(29, pos(sF0), neg(sF0)) // AIPW ATC ψ in γ₁: −sign·(1−e)/e or 1
	set(30, pos(sF1), pos(sF1)) // h(μ₁−μ₀) in γ₁
	set(31, none, neg(sF2))     // T(1−e)(Y−μ₁) in γ₁
	set(32, pos(sG0), neg(sG0)) // AIPW ATE ψ in γ₀: −1 + (1−T)/(1−e)
	set(33, pos(sG0), neg(sG0)) // AIPW ATT ψ in γ₀
	set(34, neg(sG1), neg(sG1)) // h(μ₁−μ₀) in γ₀
	set(35, neg(sG2), none)     // (1−T)e(Y−μ₀) in γ₀
	return m
}

// gradFold adds a block's gradient sums: dense dot products for numeric
// terms, sums over the ones for 0/1 terms.
type gradFold struct {
	sc          *EffectsScratch
	bt          *binaryTerms
	src         [nSlots][2]src
	p, ns, nser int
	blocks      int // since the last flush
}

func (g *gradFold) init(sc *EffectsScratch, bt *binaryTerms, run string, p, ns, nser int) {
	for a := range sc.ser {
		if len(sc.ser[a]) != p*nSeries {
			sc.ser[a] = make([]float64, p*nSeries)
		}
		clear(sc.ser[a])
	}
	if cap(sc.cur) < p {
		sc.cur = make([]int, p)
	}
	sc.cur = sc.cur[:p]
	clear(sc.cur)
	*g = gradFold{sc: sc, bt: bt, src: slotSources(run), p: p, ns: ns, nser: nser}
}

// block adds the series sums of batch rows lo…hi−1, whose series are in
// the scratch (na[a] rows of arm a), flushing them into grad every
// flushBlocks blocks; the caller flushes the rest.
func (g *gradFold) block(grad []Sum, X [][]float64, T []int8, lo, hi int, na [2]int) {
	sc, nser := g.sc, g.nser
	for a := 0; a < 2; a++ {
		S := sc.ser[a]
		n := na[a]
		if n == 0 {
			continue
		}
		P := &sc.p[a]
		for k := 0; k < nser; k++ {
			S[k] += floats.Sum(P[k][:n])
		}
		at, xg := sc.at[a][:n], sc.xg[:n]
		for j, x := range X {
			if g.bt.is[j] {
				continue
			}
			for r, i := range at {
				xg[r] = x[i]
			}
			Sj := S[(j+1)*nSeries:]
			for k := 0; k < nser; k++ {
				Sj[k] += floats.Dot(P[k][:n], xg)
			}
		}
	}
	for j := range X {
		if !g.bt.is[j] {
			continue
		}
		ones, c := g.bt.ones[j], sc.cur[j]
		var acc [2][nSeries]float64
		for ; c < len(ones) && int(ones[c]) < hi; c++ {
			i := ones[c]
			r := int(sc.pos[(int(i)-lo)&(blockRows-1)])
			if r < 0 {
				continue
			}
			r &= blockRows - 1 // no bounds checks
			a := T[i] & 1
			P := &sc.p[a]
			s := &acc[a]
			// every series (with the outcome models off, the tail is stale
			// and never used)
			s[0] += P[0][r]
			s[1] += P[1][r]
			s[2] += P[2][r]
			s[3] += P[3][r]
			s[4] += P[4][r]
			s[5] += P[5][r]
			s[6] += P[6][r]
			s[7] += P[7][r]
			s[8] += P[8][r]
			s[9] += P[9][r]
			s[10] += P[10][r]
			s[11] += P[11][r]
			s[12] += P[12][r]
			s[13] += P[13][r]
			s[14] += P[14][r]
			s[15] += P[15][r]
		}
		sc.cur[j] = c
		for a := range acc {
			S := sc.ser[a][(j+1)*nSeries : (j+1)*nSeries+nser]
			for k := range S {
				S[k] += acc[a][k]
			}
		}
	}
	g.blocks++
	if g.blocks == flushBlocks {
		g.flush(grad)
	}
}

// flushBlocks is how many blocks' series sums are added up (plainly, a few
// terms) before they go into the compensated gradient sums.
const flushBlocks = 8

// flush adds the series sums into grad, slot by slot, and clears them.
func (g *gradFold) flush(grad []Sum) {
	sc := g.sc
	g.blocks = 0
	for j := 0; j < g.p; j++ {
		s0, s1 := sc.ser[0][j*nSeries:(j+1)*nSeries], sc.ser[1][j*nSeries:(j+1)*nSeries]
		gj := grad[j*nSlots : j*nSlots+g.ns]
		for si := range gj {
			m := &g.src[si]
			var v float64
			if k := m[0].k; k >= 0 {
				v = m[0].sign * s0[k]
			}
			if k := m[1].k; k >= 0 {
				v += m[1].sign * s1[k]
			}
			gj[si].Add(v)
		}
	}
	clear(sc.ser[0])
	clear(sc.ser[1])
}
