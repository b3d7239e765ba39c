package aggregate

import (
	"gonum.org/v1/gonum/floats"

	"github.com/heft-project/heft/fit"
	"github.com/heft-project/heft/score"
)

// addDense is Effects.AddWith as it was before the per-arm series and the
// sparse sums over 0/1 terms: every gradient slot per row, dense dot
// products with every term. Tests check the fast code against it.
func (a *Effects) addDense(b *fit.Batch, s *score.Scores) {
	if a == nil || b == nil || s == nil || b.Y == nil || a.Check() != nil {
		return
	}
	n, grad, aug := a.shape(b, s)
	pol := a.Config.Policy
	clipLo, clipHi := pol.Clip, 1-pol.Clip
	clip := pol.Clip > 0
	trunc := pol.Cap > 0
	run := pol.Estimand
	logit := a.logisticOutcome()

	last, ns := nComp, nSlots
	if !aug {
		last, ns = cAugATE, nAugFree
	}
	if !grad {
		ns = 0
	}
	B := blockRows
	V, Q := make([]float64, nComp*B), make([]float64, nSlots*B)
	var v, dE, dM1, dM0 [nComp]float64
	for lo := 0; lo < n; lo += B {
		hi := min(lo+B, n)
		for i := lo; i < hi; i++ {
			r := i - lo
			if !a.usableDense(b, s, i, aug) {
				for c := 0; c < last; c++ {
					V[c*B+r] = 0
				}
				for si := 0; si < ns; si++ {
					Q[si*B+r] = 0
				}
				continue
			}
			a.Rows++
			e, y, wr := s.E[i], b.Y[i], s.W[i]
			var m0, m1 float64
			if aug {
				m0, m1 = s.Mu0[i], s.Mu1[i]
			}

			tt := float64(b.T[i])
			u := 1 - tt
			sg := tt - u // +1 treated, −1 control
			ie, ic := 1/e, 1/(1-e)
			// The row's arm weight and its derivative in e, per estimand.
			var wATE, dATE, wATT, dATT, wATC, dATC, wOv, dOv float64
			if b.T[i] == 1 {
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
			v[cIPWATE], v[cIPWATE+1], dE[cIPWATE] = sg*y*wATE, 1, sg*y*dATE
			v[cIPWATT], v[cIPWATT+1], dE[cIPWATT] = sg*y*wATT, tt, sg*y*dATT
			v[cIPWATC], v[cIPWATC+1], dE[cIPWATC] = sg*y*wATC, u, sg*y*dATC

			// Hájek, with the written weight for the run's estimand.
			truncated := trunc && wr >= pol.Cap
			hajekRowDense(&v, &dE, cHajATE, run == score.ATE, wATE, dATE, wr, truncated, tt, u, y)
			hajekRowDense(&v, &dE, cHajATT, run == score.ATT, wATT, dATT, wr, truncated, tt, u, y)
			hajekRowDense(&v, &dE, cHajATC, run == score.ATC, wATC, dATC, wr, truncated, tt, u, y)
			hajekRowDense(&v, &dE, cHajOver, run == score.Overlap, wOv, dOv, wr, truncated, tt, u, y)

			if aug {
				r1, r0 := y-m1, y-m0
				v[cAugATE] = m1 - m0 + tt*r1*ie - u*r0*ic
				v[cAugATE+1] = 1
				dE[cAugATE] = -tt*r1*ie*ie - u*r0*ic*ic
				dM1[cAugATE] = 1 - tt*ie
				dM0[cAugATE] = -1 + u*ic

				v[cAugATT], v[cAugATT+1] = sg*r0*wATT, tt
				dE[cAugATT] = sg * r0 * dATT
				dM0[cAugATT] = -sg * wATT

				v[cAugATC], v[cAugATC+1] = sg*r1*wATC, u
				dE[cAugATC] = sg * r1 * dATC
				dM1[cAugATC] = -sg * wATC

				h, dh, d := e*(1-e), 1-2*e, m1-m0
				o := cAugOver
				v[o], dE[o], dM1[o], dM0[o] = h*d, dh*d, h, -h
				v[o+1], dE[o+1] = h, dh
				v[o+2], dE[o+2], dM1[o+2] = tt*(1-e)*r1, -tt*r1, -tt*(1-e)
				v[o+3], dE[o+3] = tt*(1-e), -tt
				v[o+4], dE[o+4], dM0[o+4] = u*e*r0, u*r0, -u*e
				v[o+5], dE[o+5] = u*e, u
			}

			for c := 0; c < last; c++ {
				V[c*B+r] = v[c]
			}
			if ns > 0 {
				ge := e * (1 - e)
				if clip && (e <= clipLo || e >= clipHi) {
					ge = 0
				}
				g1, g0 := 1.0, 1.0
				if logit {
					g1, g0 = m1*(1-m1), m0*(1-m0)
				}
				for si, sl := range slots[:ns] {
					var d float64
					switch sl.wrt {
					case wrtE:
						d = ge * dE[sl.comp]
					case wrtM1:
						d = g1 * dM1[sl.comp]
					default:
						d = g0 * dM0[sl.comp]
					}
					Q[si*B+r] = d
				}
			}
		}
		a.foldDense(V, Q, B, hi-lo, lo, b.X, aug, ns)
	}
}

// usable reports whether row i enters the estimators, counting it where it
// does not.
func (a *Effects) usableDense(b *fit.Batch, s *score.Scores, i int, aug bool) bool {
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

// fold adds one block of L rows (batch rows lo…lo+L−1, stored with stride
// B) into the sums: each
// a dot product over the block, so every x column is read from memory once
// per block and the rest comes from cache.
func (a *Effects) foldDense(V, Q []float64, B, L, lo int, X [][]float64, aug bool, ns int) {
	col := func(buf []float64, c int) []float64 { return buf[c*B : c*B+L] }
	k := 0
	for _, blk := range effectBlocks {
		if blk.augmented && !aug {
			break
		}
		for r := 0; r < blk.m; r++ {
			vr := col(V, blk.off+r)
			a.Sum[blk.off+r].Add(floats.Sum(vr))
			for c := r; c < blk.m; c++ {
				a.Cross[k].Add(floats.Dot(vr, col(V, blk.off+c)))
				k++
			}
		}
	}
	if ns == 0 {
		return
	}
	for si := 0; si < ns; si++ {
		a.Grad[si].Add(floats.Sum(col(Q, si)))
	}
	for j, x := range X {
		xb := x[lo : lo+L]
		g := a.Grad[(j+1)*nSlots:]
		for si := 0; si < ns; si++ {
			g[si].Add(floats.Dot(col(Q, si), xb))
		}
	}
}

// hajekRow sets one Hájek block's components wTY, wT, w(1−T)Y, w(1−T) and
// their derivatives in e. For the run's own estimand w is the written weight
// wr: stabilization scales the derivative, truncation zeroes it.
func hajekRowDense(v, dE *[nComp]float64, off int, isRun bool, w, dw, wr float64, truncated bool, tt, u, y float64) {
	if isRun {
		if truncated {
			dw = 0
		} else {
			dw *= wr / w
		}
		w = wr
	}
	v[off], v[off+1], v[off+2], v[off+3] = w*tt*y, w*tt, w*u*y, w*u
	dE[off], dE[off+1], dE[off+2], dE[off+3] = dw*tt*y, dw*tt, dw*u*y, dw*u
}
