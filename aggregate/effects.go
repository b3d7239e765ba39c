package aggregate

import (
	"encoding/json"
	"fmt"
	"math"

	"gonum.org/v1/gonum/floats"

	"github.com/heft-project/heft/fit"
	"github.com/heft-project/heft/score"
)

// Estimator names, the inner keys of Estimates.
const (
	EstimatorIPW   = "ipw"   // Horvitz–Thompson, unnormalized
	EstimatorHajek = "hajek" // normalized weights
	EstimatorAIPW  = "aipw"  // augmented (doubly robust)
)

// z975 is the 0.975 quantile of the standard normal, for 95% intervals.
const z975 = 1.959963984540054

// effectsLayout versions the component layout below; states with another
// layout do not merge.
const effectsLayout = 1

// EffectsConfig says what the run can estimate. NTerms is the number of model
// terms including the intercept, len(Model.Propensity.Coef); it sizes the
// gradients of the second standard error. OutcomeKind is "continuous" or
// "binary" (fit.Outcome.Kind; "gaussian"/"binomial" are accepted too).
type EffectsConfig struct {
	Policy      score.Policy `json:"policy"`
	HasOutcome  bool         `json:"has_outcome"`
	OutcomeKind string       `json:"outcome_kind,omitempty"`
	NTerms      int          `json:"n_terms"`
}

// Effects accumulates, in one pass and constant memory, everything needed for
// the effect estimates of every estimand (ATE, ATT, ATC, overlap) by every
// estimator (Horvitz–Thompson "ipw", Hájek "hajek", augmented "aipw"), their
// influence-function standard errors and the gradients of the delta-method
// term. Every field is a sum, so Merge is addition.
//
// # Estimators
//
// With n the rows used, n₁ = ΣT, n₀ = Σ(1−T), e the propensity as used
// (after clipping), μ₀, μ₁ the outcome models' predictions:
//
//	ipw ATE   (1/n)·Σ[TY/e − (1−T)Y/(1−e)]            (Horvitz & Thompson 1952)
//	ipw ATT   (1/n₁)·Σ[TY − (1−T)Y·e/(1−e)]            (Hirano, Imbens & Ridder 2003)
//	ipw ATC   (1/n₀)·Σ[TY(1−e)/e − (1−T)Y]             (the mirror image of ATT)
//	hajek     ΣwTY/ΣwT − Σw(1−T)Y/Σw(1−T)              (Hájek 1971; Hirano, Imbens & Ridder 2003)
//	aipw ATE  (1/n)·Σ[μ₁ − μ₀ + T(Y−μ₁)/e − (1−T)(Y−μ₀)/(1−e)]
//	          (Robins, Rotnitzky & Zhao 1994; Lunceford & Davidian 2004, Stat. Med. 23:2937–2960)
//	aipw ATT  (1/n₁)·Σ[T(Y−μ₀) − (1−T)(Y−μ₀)·e/(1−e)]
//	aipw ATC  (1/n₀)·Σ[T(Y−μ₁)(1−e)/e − (1−T)(Y−μ₁)]
//	          (the doubly robust ATT of Mercatanti & Li 2014, Ann. Appl. Stat. 8:2485–2508,
//	          and Moodie, Saarela & Stephens 2018, Stat 7:e205 — references from memory; ATC mirrored)
//	aipw overlap  Σh(μ₁−μ₀)/Σh + ΣT(1−e)(Y−μ₁)/ΣT(1−e) − Σ(1−T)e(Y−μ₀)/Σ(1−T)e,  h = e(1−e)
//	          (augmented overlap weighting, Mao, Li & Greene 2019, Stat. Methods Med. Res.
//	          28:2439–2454 — the form as we recall it, from memory)
//
// There is no Horvitz–Thompson overlap estimator: its normalizing constant
// E[e(1−e)] is unknown. Hájek's w is the estimand's weight (score.Weight of
// the clipped e); for the run's own estimand it is the written weight s.W,
// so stabilization (which cancels within an arm) and truncation (which does
// not) apply as written. ipw and aipw use e itself.
//
// # Rows
//
// Rows with a null treatment (T = −1), an invalid outcome (YValid false) or
// trimmed (InSupport false: weight 0 for every estimand) are left out of
// every estimator, so with trimming all estimands refer to the rows kept and
// n counts those. Rows whose e is not strictly inside (0, 1) or whose Y, w,
// μ₀ or μ₁ is not finite cannot be weighted and are counted in Degenerate.
//
// # Standard errors
//
// Each estimator is a smooth function τ̂ = f(S) of a few column sums
// S_c = Σᵢ v_cᵢ (v per row, e.g. ψ and T for ipw ATT; wTY, wT, w(1−T)Y,
// w(1−T) for Hájek). Linearizing, the influence function is
// φᵢ = n·Σ_c a_c (v_cᵢ − S_c/n) with a = ∂f/∂S, and
//
//	Var₁ = Σᵢ(φᵢ − φ̄)²/n² = aᵀ(Σᵢ vᵢvᵢᵀ)a − (aᵀS)²/n
//
// (the sandwich form with divisor n; for a ratio Σψ/Σd it is
// Σ(ψ − τ̂d)²/(Σd)², for Hájek's arm mean φᵢ = n·wᵢTᵢ(Yᵢ − μ̂₁)/ΣwT). So the
// state keeps S and the cross sums Σvᵢvᵢᵀ within each estimator, and Σφ² is
// recovered exactly by expansion at the end. The expansion cancels when the
// outcome's mean is large against its spread (about mean²/variance relative
// digits are lost); sums are compensated to keep the rest. Var₁ treats the
// fitted models as fixed; for ipw ATE this is known to be conservative
// (Lunceford & Davidian 2004).
//
// The second standard error adds the fit sample's uncertainty in the
// coefficients by the delta method, treating the fit sample as independent
// of the scored table:
//
//	Var₂ = Var₁ + g_βᵀΣ_β g_β + g_γ₁ᵀΣ_γ₁ g_γ₁ + g_γ₀ᵀΣ_γ₀ g_γ₀,   g = ∂τ̂/∂coefficients
//
// with Σ the model file's covariances and g = Σ_c a_c ∂S_c/∂coef, where the
// ∂S_c/∂coef are accumulated in the pass: ∂e/∂β = e(1−e)·x, x = (1, X…),
// zero where clipping was active; ∂μ/∂γ = x for a linear model and μ(1−μ)·x
// for a logistic one. The written weight's derivative is zero where it was
// truncated, and the trimmed set is held fixed.
//
// Intervals are the 95% normal ones, τ̂ ± 1.959963984540054·SE₁.
type Effects struct {
	Config EffectsConfig `json:"config"`
	Layout int           `json:"layout"`
	// Rows counts rows used; the others count rows left out.
	Rows           int64 `json:"rows"`
	NullTreatment  int64 `json:"null_treatment"`
	InvalidOutcome int64 `json:"invalid_outcome"`
	Trimmed        int64 `json:"trimmed"`
	Degenerate     int64 `json:"degenerate"`
	// NoGradient is set when a batch's terms did not match Config.NTerms;
	// NoAugmented when outcome predictions were missing though HasOutcome.
	// The affected standard errors (estimates) are then NaN.
	NoGradient  bool `json:"no_gradient,omitempty"`
	NoAugmented bool `json:"no_augmented,omitempty"`
	// Sum is S_c per component; Cross the packed upper triangle of Σvvᵀ
	// within each estimator's block; Grad is ∂S/∂coef, term-major:
	// Grad[j·nSlots + s] for term j and gradient slot s.
	Sum   []Sum `json:"sum"`
	Cross []Sum `json:"cross"`
	Grad  []Sum `json:"grad"`

	own *EffectsScratch // for Add; AddWith takes a shared one
}

// blockRows is the rows per block: per-row values are written column-major
// into scratch, and each block's sums are dot products (plain floating
// point over at most blockRows rows) added into the compensated sums.
const blockRows = 128

// EffectsScratch is the per-block working memory of Add, about 70 KB; its
// arrays have the block's size fixed, so indexing them needs no checks. It
// holds no results, so one scratch per goroutine can serve any number of
// Effects (e.g. one per segment) through AddWith.
type EffectsScratch struct {
	rows int                             // blockRows once allocated
	v    *[nComp][blockRows]float64      // per component, the block's rows
	p    *[2][nSeries][blockRows]float64 // per arm and gradient series (sE0…), the arm's rows
	at   [2][blockRows]int32             // per arm, the batch rows of the block's series
	pos  [blockRows]int32                // per block row: its index among its arm's, −1 if unused
	xg   [blockRows]float64              // a term's values gathered for one arm's rows
	ser  [2][]float64                    // per arm, per term, series sums since the last flush
	cur  []int                           // per 0/1 term, the next of its ones to visit
	bin  binaryTerms                     // AddWith's own, when the caller has none
}

// NewEffectsScratch allocates a scratch.
func NewEffectsScratch() *EffectsScratch {
	return &EffectsScratch{rows: blockRows, v: new([nComp][blockRows]float64), p: new([2][nSeries][blockRows]float64)}
}

// ok reports whether sc was made by NewEffectsScratch.
func (sc *EffectsScratch) ok() bool { return sc.rows == blockRows && sc.v != nil && sc.p != nil }

// Components: each estimator's per-row values v, at a fixed offset.
const (
	cIPWATE  = 0  // ψ, 1
	cIPWATT  = 2  // ψ, T
	cIPWATC  = 4  // ψ, 1−T
	cHajATE  = 6  // wTY, wT, w(1−T)Y, w(1−T)
	cHajATT  = 10 //
	cHajATC  = 14 //
	cHajOver = 18 //
	cAugATE  = 22 // ψ, 1
	cAugATT  = 24 // ψ, T
	cAugATC  = 26 // ψ, 1−T
	cAugOver = 28 // hΔ, h, T(1−e)(Y−μ₁), T(1−e), (1−T)e(Y−μ₀), (1−T)e
	nComp    = 34
)

// ratio is one term sign·S_num/S_den of an estimator; indices are offsets
// within the block.
type ratio struct {
	sign     float64
	num, den int
}

type block struct {
	estimand, estimator string
	off, m              int
	terms               []ratio
	augmented           bool
	cross               int // offset in Cross
}

var hajekTerms = []ratio{{1, 0, 1}, {-1, 2, 3}}

// blockTable lists the estimators, augmented ones last, with each block's
// offset into Cross.
func blockTable() []block {
	bs := []block{
		{score.ATE, EstimatorIPW, cIPWATE, 2, []ratio{{1, 0, 1}}, false, 0},
		{score.ATT, EstimatorIPW, cIPWATT, 2, []ratio{{1, 0, 1}}, false, 0},
		{score.ATC, EstimatorIPW, cIPWATC, 2, []ratio{{1, 0, 1}}, false, 0},
		{score.ATE, EstimatorHajek, cHajATE, 4, hajekTerms, false, 0},
		{score.ATT, EstimatorHajek, cHajATT, 4, hajekTerms, false, 0},
		{score.ATC, EstimatorHajek, cHajATC, 4, hajekTerms, false, 0},
		{score.Overlap, EstimatorHajek, cHajOver, 4, hajekTerms, false, 0},
		{score.ATE, EstimatorAIPW, cAugATE, 2, []ratio{{1, 0, 1}}, true, 0},
		{score.ATT, EstimatorAIPW, cAugATT, 2, []ratio{{1, 0, 1}}, true, 0},
		{score.ATC, EstimatorAIPW, cAugATC, 2, []ratio{{1, 0, 1}}, true, 0},
		{score.Overlap, EstimatorAIPW, cAugOver, 6, []ratio{{1, 0, 1}, {1, 2, 3}, {-1, 4, 5}}, true, 0},
	}
	k := 0
	for i := range bs {
		bs[i].cross = k
		k += bs[i].m * (bs[i].m + 1) / 2
	}
	return bs
}

// nCross is the total length of the packed cross sums.
const nCross = 3*3 + 4*10 + 3*3 + 21

// Gradient slots: which component's derivative in which coefficients. The
// structurally zero ones (constant components, unit weights) are left out.
const (
	wrtE  = iota // propensity coefficients β
	wrtM1        // treated outcome model γ₁
	wrtM0        // control outcome model γ₀
)

type slot struct{ comp, wrt int }

var slots = []slot{
	{cIPWATE, wrtE}, {cIPWATT, wrtE}, {cIPWATC, wrtE},
	{cHajATE, wrtE}, {cHajATE + 1, wrtE}, {cHajATE + 2, wrtE}, {cHajATE + 3, wrtE},
	{cHajATT, wrtE}, {cHajATT + 1, wrtE}, {cHajATT + 2, wrtE}, {cHajATT + 3, wrtE},
	{cHajATC, wrtE}, {cHajATC + 1, wrtE}, {cHajATC + 2, wrtE}, {cHajATC + 3, wrtE},
	{cHajOver, wrtE}, {cHajOver + 1, wrtE}, {cHajOver + 2, wrtE}, {cHajOver + 3, wrtE},
	{cAugATE, wrtE}, {cAugATT, wrtE}, {cAugATC, wrtE},
	{cAugOver, wrtE}, {cAugOver + 1, wrtE}, {cAugOver + 2, wrtE}, {cAugOver + 3, wrtE}, {cAugOver + 4, wrtE}, {cAugOver + 5, wrtE},
	{cAugATE, wrtM1}, {cAugATC, wrtM1}, {cAugOver, wrtM1}, {cAugOver + 2, wrtM1},
	{cAugATE, wrtM0}, {cAugATT, wrtM0}, {cAugOver, wrtM0}, {cAugOver + 4, wrtM0},
}

// nSlots is len(slots).
const nSlots = 36

// NewEffects returns an empty accumulator.
func NewEffects(cfg EffectsConfig) *Effects {
	p := max(cfg.NTerms, 0)
	return &Effects{
		Config: cfg,
		Layout: effectsLayout,
		Sum:    make([]Sum, nComp),
		Cross:  make([]Sum, nCross),
		Grad:   make([]Sum, p*nSlots),
	}
}

func (a *Effects) logisticOutcome() bool {
	return a.Config.OutcomeKind == "binary" || a.Config.OutcomeKind == fit.FamilyBinomial
}

// Add folds in one scored batch (see the type's doc for the rows used). It
// allocates its scratch on the first call and nothing after.
func (a *Effects) Add(b *fit.Batch, s *score.Scores) {
	if a == nil || b == nil {
		return
	}
	if a.own == nil {
		a.own = NewEffectsScratch()
	}
	a.AddWith(b, s, a.own)
}

// AddWith is Add with the caller's scratch (a zero EffectsScratch is fine),
// which must not be in use by another goroutine.
func (a *Effects) AddWith(b *fit.Batch, s *score.Scores, sc *EffectsScratch) {
	a.addWith(b, s, sc, nil)
}

// shape returns the rows of a batch that every buffer covers, and whether
// the gradient sums and the augmented estimators can use it; it records in
// a when they cannot (NoGradient, NoAugmented).
func (a *Effects) shape(b *fit.Batch, s *score.Scores) (n int, grad, aug bool) {
	n = min(b.N, len(b.T), len(b.Y), len(s.E), len(s.W), len(s.InSupport))
	if b.YValid != nil {
		n = min(n, len(b.YValid))
	}
	p := a.Config.NTerms
	grad = p > 0 && len(a.Grad) == p*nSlots && len(b.X) == p-1
	if grad {
		for _, x := range b.X {
			if len(x) < n {
				grad = false
			}
		}
	}
	if p > 0 && !grad {
		a.NoGradient = true
	}
	aug = a.Config.HasOutcome
	if aug && (len(s.Mu0) < n || len(s.Mu1) < n) {
		a.NoAugmented = true
		aug = false
	}
	return n, grad, aug
}

// addWith is AddWith with the batch's 0/1 terms already found (bt nil: find
// them here).
func (a *Effects) addWith(b *fit.Batch, s *score.Scores, sc *EffectsScratch, bt *binaryTerms) {
	if a == nil || b == nil || s == nil || b.Y == nil || sc == nil || a.Check() != nil {
		return
	}
	if !sc.ok() {
		*sc = *NewEffectsScratch() // the zero value is ready to use
	}
	n, grad, aug := a.shape(b, s)
	p := a.Config.NTerms
	pol := a.Config.Policy
	clipLo, clipHi := pol.Clip, 1-pol.Clip
	clip := pol.Clip > 0
	trunc := pol.Cap > 0
	run := pol.Estimand
	logit := a.logisticOutcome()

	last, ns, nser := nComp, nSlots, nSeries
	if !aug {
		last, ns, nser = cAugATE, nAugFree, nSeriesAugFree
	}
	var g gradFold
	if grad {
		if bt == nil || len(bt.is) != len(b.X) {
			bt = &sc.bin
			bt.find(b.X, n)
		}
		g.init(sc, bt, run, p, ns, nser)
	}
	runATE, runATT, runATC, runOv := run == score.ATE, run == score.ATT, run == score.ATC, run == score.Overlap
	V, B := sc.v, blockRows
	for lo := 0; lo < n; lo += B {
		hi := min(lo+B, n)
		// The block's usable rows listed per arm, then visited arm by arm,
		// so that the branches on the arm below are taken the same way in
		// a run and predicted.
		var na [2]int
		for i := lo; i < hi; i++ {
			r := (i - lo) & (blockRows - 1) // i − lo < blockRows: no bounds checks
			if !a.usable(b, s, i, aug) {
				for c := 0; c < last; c++ {
					V[c][r] = 0
				}
				sc.pos[r] = -1
				continue
			}
			arm := b.T[i] & 1
			k := na[arm] & (blockRows - 1)
			na[arm]++
			sc.pos[r], sc.at[arm][k] = int32(k), int32(i)
		}
		a.Rows += int64(na[0] + na[1])
		for _, arm := range [2]int8{1, 0} {
			for k, i32 := range sc.at[arm&1][:na[arm&1]] {
				i := int(i32)
				r := (i - lo) & (blockRows - 1)
				e, y, wr := s.E[i], b.Y[i], s.W[i]
				var m0, m1 float64
				if aug {
					m0, m1 = s.Mu0[i], s.Mu1[i]
				}

				treated := arm == 1
				tt := float64(arm)
				u := 1 - tt
				sg := tt - u // +1 treated, −1 control
				ie, ic := 1/e, 1/(1-e)
				// The row's arm weight and its derivative in e, per estimand.
				var wATE, dATE, wATT, dATT, wATC, dATC, wOv, dOv float64
				if treated {
					wATE, dATE = ie, -ie*ie
					wATT, dATT = 1, 0
					wATC, dATC = (1-e)*ie, -ie*ie
					wOv, dOv = 1-e, -1
				} else {
					wATE, dATE = ic, ic*ic
					wATT, dATT = e*ic, ic*ic
					wATC, dATC = 1, 0
					wOv, dOv = e, 1
				}

				// Horvitz–Thompson: ψ = sign·Y·w.
				V[cIPWATE][r], V[cIPWATE+1][r] = sg*y*wATE, 1
				V[cIPWATT][r], V[cIPWATT+1][r] = sg*y*wATT, tt
				V[cIPWATC][r], V[cIPWATC+1][r] = sg*y*wATC, u

				// Hájek, with the written weight for the run's estimand: its
				// derivative is scaled by stabilization and zeroed by truncation.
				var wRun, dRun float64
				switch {
				case runATE:
					wRun, dRun = wATE, dATE
				case runATT:
					wRun, dRun = wATT, dATT
				case runATC:
					wRun, dRun = wATC, dATC
				case runOv:
					wRun, dRun = wOv, dOv
				}
				if (trunc && wr >= pol.Cap) || wRun == 0 {
					dRun = 0
				} else {
					dRun *= wr / wRun
				}
				hajekRow(V, r, cHajATE, pick(runATE, wr, wATE), tt, u, y)
				hajekRow(V, r, cHajATT, pick(runATT, wr, wATT), tt, u, y)
				hajekRow(V, r, cHajATC, pick(runATC, wr, wATC), tt, u, y)
				hajekRow(V, r, cHajOver, pick(runOv, wr, wOv), tt, u, y)

				var r1, r0, h, dh, d float64
				if aug {
					r1, r0 = y-m1, y-m0
					V[cAugATE][r] = m1 - m0 + tt*r1*ie - u*r0*ic
					V[cAugATE+1][r] = 1
					V[cAugATT][r], V[cAugATT+1][r] = sg*r0*wATT, tt
					V[cAugATC][r], V[cAugATC+1][r] = sg*r1*wATC, u
					h, dh, d = e*(1-e), 1-2*e, m1-m0
					o := cAugOver
					V[o][r] = h * d
					V[o+1][r] = h
					V[o+2][r] = tt * (1 - e) * r1
					V[o+3][r] = tt * (1 - e)
					V[o+4][r] = u * e * r0
					V[o+5][r] = u * e
				}

				if !grad {
					continue
				}
				ge := e * (1 - e)
				if clip && (e <= clipLo || e >= clipHi) {
					ge = 0
				}
				g1, g0 := 1.0, 1.0
				if logit {
					g1, g0 = m1*(1-m1), m0*(1-m0)
				}
				P := &sc.p[arm&1]
				// the series of gradSeries, for the row's arm
				if treated {
					P[sE0][k], P[sE1][k] = ge*(y*(ie*ie)), ge*(ie*ie)
					if aug {
						P[sE4][k], P[sE7][k] = ge*(r1*(ie*ie)), ge*r1
						P[sF0][k], P[sF2][k] = g1*((1-e)*ie), g1*(1-e)
						P[sG0][k], P[sG2][k] = g0, 0
					}
				} else {
					P[sE0][k], P[sE1][k] = ge*(y*(ic*ic)), ge*(ic*ic)
					if aug {
						P[sE4][k], P[sE7][k] = ge*(r0*(ic*ic)), ge*r0
						P[sF0][k], P[sF2][k] = g1, 0
						P[sG0][k], P[sG2][k] = g0*(e*ic), g0*e
					}
				}
				P[sE2][k], P[sE3][k] = ge*y, ge
				P[sR0][k], P[sR1][k] = ge*(dRun*y), ge*dRun
				if aug {
					P[sE5][k], P[sE6][k] = ge*(dh*d), ge*dh
					P[sF1][k], P[sG1][k] = g1*h, g0*h
				}
			}
		}
		a.fold(V, hi-lo, aug)
		if grad {
			g.block(a.Grad, b.X, b.T, lo, hi, na)
		}
	}
	if grad {
		g.flush(a.Grad)
	}
}

func pick(c bool, a, b float64) float64 {
	if c {
		return a
	}
	return b
}

// usable reports whether row i enters the estimators, counting it where it
// does not.
func (a *Effects) usable(b *fit.Batch, s *score.Scores, i int, aug bool) bool {
	if t := b.T[i]; t != 0 && t != 1 {
		a.NullTreatment++
		return false
	}
	if b.YValid != nil && !b.YValid[i] {
		a.InvalidOutcome++
		return false
	}
	if !s.InSupport[i] {
		a.Trimmed++
		return false
	}
	e := s.E[i]
	ok := e > 0 && e < 1 && finite(b.Y[i]) && finite(s.W[i])
	if aug {
		ok = ok && finite(s.Mu0[i]) && finite(s.Mu1[i])
	}
	if !ok {
		a.Degenerate++
	}
	return ok
}

// fold adds one block of L rows into the sums and
// cross sums: each a dot product over the block.
func (a *Effects) fold(V *[nComp][blockRows]float64, L int, aug bool) {
	col := func(c int) []float64 { return V[c][:L] }
	k := 0
	for _, blk := range effectBlocks {
		if blk.augmented && !aug {
			break
		}
		for r := 0; r < blk.m; r++ {
			vr := col(blk.off + r)
			a.Sum[blk.off+r].Add(floats.Sum(vr))
			for c := r; c < blk.m; c++ {
				if !armsApart(blk, r, c) {
					a.Cross[k].Add(floats.Dot(vr, col(blk.off+c)))
				}
				k++
			}
		}
	}
}

// armsApart reports whether components r and c of blk are never both
// nonzero on one row, one being 0 on control rows and the other on treated
// rows (Hájek's wTY, wT against w(1−T)Y, w(1−T); the augmented overlap's
// T(1−e)… against (1−T)e…), so their cross sum is 0 and is skipped.
func armsApart(blk block, r, c int) bool {
	switch {
	case blk.estimator == EstimatorHajek:
		return r < 2 && c >= 2
	case blk.estimand == score.Overlap && blk.augmented:
		return (r == 2 || r == 3) && c >= 4
	}
	return false
}

// hajekRow sets one Hájek block's components wTY, wT, w(1−T)Y, w(1−T).
func hajekRow(V *[nComp][blockRows]float64, r, off int, w, tt, u, y float64) {
	V[off][r], V[off+1][r], V[off+2][r], V[off+3][r] = w*tt*y, w*tt, w*u*y, w*u
}

// nAugFree is the number of leading slots that do not need outcome models.
const nAugFree = 19

// effectBlocks is the estimator table, read-only.
var effectBlocks = blockTable()

// finite is false for NaN and ±Inf.
func finite(x float64) bool { return math.Abs(x) <= math.MaxFloat64 }

// Check reports whether a state (e.g. one read back from JSON) has the
// layout its configuration implies.
func (a *Effects) Check() error {
	if a.Layout != effectsLayout {
		return fmt.Errorf("effects: state layout %d, this heft reads layout %d", a.Layout, effectsLayout)
	}
	if len(a.Sum) != nComp || len(a.Cross) != nCross || len(a.Grad) != max(a.Config.NTerms, 0)*nSlots {
		return fmt.Errorf("effects: state has %d/%d/%d sums, want %d/%d/%d for %d terms",
			len(a.Sum), len(a.Cross), len(a.Grad), nComp, nCross, max(a.Config.NTerms, 0)*nSlots, a.Config.NTerms)
	}
	return nil
}

// Merge adds o's sums into a. Both must come from the same configuration.
func (a *Effects) Merge(o *Effects) error {
	if o == nil {
		return nil
	}
	if err := a.Check(); err != nil {
		return err
	}
	if err := o.Check(); err != nil {
		return err
	}
	if o.Config != a.Config {
		return fmt.Errorf("effects: cannot merge states of different runs (%+v and %+v)", a.Config, o.Config)
	}
	a.Rows += o.Rows
	a.NullTreatment += o.NullTreatment
	a.InvalidOutcome += o.InvalidOutcome
	a.Trimmed += o.Trimmed
	a.Degenerate += o.Degenerate
	a.NoGradient = a.NoGradient || o.NoGradient
	a.NoAugmented = a.NoAugmented || o.NoAugmented
	for c := range a.Sum {
		a.Sum[c].Merge(o.Sum[c])
	}
	for c := range a.Cross {
		a.Cross[c].Merge(o.Cross[c])
	}
	for c := range a.Grad {
		a.Grad[c].Merge(o.Grad[c])
	}
	return nil
}

// Estimate is one effect estimate. Non-finite values (an empty arm, a missing
// covariance) are written as JSON null.
type Estimate struct {
	Estimate               float64 `json:"estimate"`
	SE                     float64 `json:"se"`
	SEWithModelUncertainty float64 `json:"se_with_model_uncertainty"`
	CILow                  float64 `json:"ci_low"`
	CIHigh                 float64 `json:"ci_high"`
}

// estimateJSON mirrors Estimate with nullable numbers.
type estimateJSON struct {
	Estimate               *float64 `json:"estimate"`
	SE                     *float64 `json:"se"`
	SEWithModelUncertainty *float64 `json:"se_with_model_uncertainty"`
	CILow                  *float64 `json:"ci_low"`
	CIHigh                 *float64 `json:"ci_high"`
}

func nullable(x float64) *float64 {
	if !finite(x) {
		return nil
	}
	return &x
}

func unnull(p *float64) float64 {
	if p == nil {
		return math.NaN()
	}
	return *p
}

// MarshalJSON writes non-finite numbers as null (encoding/json refuses them).
func (e Estimate) MarshalJSON() ([]byte, error) {
	return json.Marshal(estimateJSON{nullable(e.Estimate), nullable(e.SE), nullable(e.SEWithModelUncertainty), nullable(e.CILow), nullable(e.CIHigh)})
}

// UnmarshalJSON reads null as NaN.
func (e *Estimate) UnmarshalJSON(b []byte) error {
	var j estimateJSON
	if err := json.Unmarshal(b, &j); err != nil {
		return err
	}
	*e = Estimate{unnull(j.Estimate), unnull(j.SE), unnull(j.SEWithModelUncertainty), unnull(j.CILow), unnull(j.CIHigh)}
	return nil
}

// Estimates returns estimand → estimator → Estimate for every estimand and
// the estimators defined for it: no "ipw" for overlap, "aipw" only with
// outcome models (none at all for a state that fails Check). m supplies the
// coefficient covariances of the second standard error; with m nil, or a
// covariance missing or of the wrong size, SEWithModelUncertainty is NaN.
func (a *Effects) Estimates(m *fit.Model) map[string]map[string]Estimate {
	out := make(map[string]map[string]Estimate, len(score.Estimands))
	for _, est := range score.Estimands {
		out[est] = make(map[string]Estimate, 3)
	}
	if a.Check() != nil {
		return out
	}
	p := a.Config.NTerms
	var covB, cov1, cov0 [][]float64
	if m != nil {
		covB = m.Propensity.Cov
		if m.Outcome != nil {
			cov1, cov0 = m.Outcome.Treated.Cov, m.Outcome.Control.Cov
		}
	}
	n := float64(a.Rows)
	var S, coef [6]float64
	g := make([]float64, 3*max(p, 0))
	for _, blk := range effectBlocks {
		if blk.augmented && !a.Config.HasOutcome {
			continue
		}
		for c := 0; c < blk.m; c++ {
			S[c] = a.Sum[blk.off+c].Value()
			coef[c] = 0
		}
		tau := 0.0
		for _, r := range blk.terms {
			num, den := S[r.num], S[r.den]
			tau += r.sign * num / den
			coef[r.num] += r.sign / den
			coef[r.den] -= r.sign * num / (den * den)
		}
		// Var₁ = aᵀ(Σvvᵀ)a − (aᵀS)²/n.
		quad, lin, k := 0.0, 0.0, blk.cross
		for r := 0; r < blk.m; r++ {
			lin += coef[r] * S[r]
			for c := r; c < blk.m; c++ {
				x := a.Cross[k].Value()
				k++
				if c == r {
					quad += coef[r] * coef[r] * x
				} else {
					quad += 2 * coef[r] * coef[c] * x
				}
			}
		}
		var1 := math.Max(quad-lin*lin/n, 0)
		if blk.augmented && a.NoAugmented {
			tau, var1 = math.NaN(), math.NaN()
		}

		// g = Σ_c a_c ∂S_c/∂coef, per model.
		clear(g)
		for si, sl := range slots {
			c := sl.comp - blk.off
			if c < 0 || c >= blk.m {
				continue
			}
			for j := 0; j < p; j++ {
				g[sl.wrt*p+j] += coef[c] * a.Grad[j*nSlots+si].Value()
			}
		}
		var2 := var1 + quadForm(covB, g[:p])
		if blk.augmented {
			var2 += quadForm(cov1, g[p:2*p]) + quadForm(cov0, g[2*p:])
		}
		if a.NoGradient || p <= 0 {
			var2 = math.NaN()
		}
		se := math.Sqrt(var1)
		out[blk.estimand][blk.estimator] = Estimate{
			Estimate:               tau,
			SE:                     se,
			SEWithModelUncertainty: math.Sqrt(var2),
			CILow:                  tau - z975*se,
			CIHigh:                 tau + z975*se,
		}
	}
	return out
}

// quadForm is gᵀΣg, NaN when Σ is missing or not len(g)×len(g).
func quadForm(cov [][]float64, g []float64) float64 {
	if len(cov) != len(g) || len(g) == 0 {
		return math.NaN()
	}
	s := 0.0
	for r, row := range cov {
		if len(row) != len(g) {
			return math.NaN()
		}
		s += g[r] * floats.Dot(row, g)
	}
	return s
}
