package aggregate

import (
	"encoding/json"
	"fmt"
	"math"
	"strings"
	"testing"

	"github.com/heft-project/heft/score"
)

func TestBinaryTermsFind(t *testing.T) {
	n := 300
	x := [][]float64{make([]float64, n), make([]float64, n), make([]float64, n), make([]float64, n)}
	var want []int32
	for i := 0; i < n; i++ {
		if i%7 == 3 {
			x[0][i] = 1
			want = append(want, int32(i))
		}
		x[1][i] = float64(i % 2)
		x[2][i] = float64(i%3) * 0.5 // 0, 0.5, 1: not 0/1
		x[3][i] = 1
	}
	x[1][n-1] = math.NaN() // a NaN in the last chunk
	var bt binaryTerms
	bt.find(x, n)
	if !bt.is[0] || bt.is[1] || bt.is[2] || !bt.is[3] {
		t.Fatalf("is = %v, want [true false false true]", bt.is)
	}
	if len(bt.ones[0]) != len(want) || len(bt.ones[3]) != n {
		t.Fatalf("%d and %d ones, want %d and %d", len(bt.ones[0]), len(bt.ones[3]), len(want), n)
	}
	for k, i := range want {
		if bt.ones[0][k] != i {
			t.Fatalf("one %d at row %d, want %d", k, bt.ones[0][k], i)
		}
	}
	bt.find(x, 0)
	for j, is := range bt.is {
		if is {
			t.Errorf("term %d is 0/1 in an empty batch", j)
		}
	}
}

// TestBinaryBalance: the 0/1 path gives the figures of the general path, to
// 1e-12, on the fixture's 0/1 terms x3, cat=b and cat=c and on x1 made an
// indicator, with null treatments and zero weights among the rows.
func TestBinaryBalance(t *testing.T) {
	fx := loadFixture(t)
	x := make([][]float64, len(fx.x))
	copy(x, fx.x)
	// x1 replaced by an indicator, so a 0/1 term whose edges do not split 0
	// from 1 is covered too
	ind := make([]float64, fx.n)
	for i, v := range fx.x[0] {
		if v > 0.3 {
			ind[i] = 1
		}
	}
	x[0] = ind
	for _, est := range score.Estimands {
		m := fx.model()
		edges := make([][]float64, len(x))
		for j := range edges {
			edges[j] = m.Reference.Terms[j].Edges
		}
		edges[0] = []float64{0.5, 1.5} // 0 and 1 in different bins
		fast, dense := newBalance(len(x), edges), newBalance(len(x), edges)
		var bt binaryTerms
		nBinary := 0
		for _, cut := range [][2]int{{0, 17}, {17, 200}, {200, fx.n}} {
			lo, hi := cut[0], cut[1]
			xs := make([][]float64, len(x))
			for j := range x {
				xs[j] = x[j][lo:hi]
			}
			arm := fx.t[lo:hi]
			w := make([]float64, hi-lo)
			var rows arms
			rows.split(arm)
			var sw [2]float64
			for i := range w {
				if arm[i] >= 0 && i%11 != 5 { // some usable rows have weight 0
					w[i] = score.Weight(est, arm[i], fx.e[lo+i])
				}
			}
			for a, idx := range rows {
				for _, i := range idx {
					sw[a] += w[i]
				}
			}
			hist := make([]float64, 32)
			bt.find(xs, hi-lo)
			for _, is := range bt.is {
				nBinary += b2i(is)
			}
			fast.add(xs, &rows, w, hist, &bt, arm, sw)
			dense.add(xs, &rows, w, hist, nil, arm, sw)
		}
		if nBinary != 4*3 {
			t.Fatalf("%d 0/1 term batches, want 12", nBinary)
		}
		for j := range x {
			f, d := fast.term(j, est), dense.term(j, est)
			fv := []float64{f.MeanT, f.MeanC, f.MeanTW, f.MeanCW, f.VarT, f.VarC, f.VarTW, f.VarCW, f.SMD, f.SMDW, f.VarRatioW, f.KSW}
			dv := []float64{d.MeanT, d.MeanC, d.MeanTW, d.MeanCW, d.VarT, d.VarC, d.VarTW, d.VarCW, d.SMD, d.SMDW, d.VarRatioW, d.KSW}
			for k := range fv {
				if diff := relDiff(fv[k], dv[k]); diff > 1e-12 || math.IsNaN(fv[k]) != math.IsNaN(dv[k]) {
					t.Errorf("%s term %d figure %d: 0/1 path %v, general %v", est, j, k, fv[k], dv[k])
				}
			}
		}
	}
}

// TestBinaryEffects: the per-arm gradient series and the sums over the ones
// of 0/1 terms give the sums of the dense computation (addDense, every slot
// times every term) to 1e-12, on every effects scenario, with and without
// outcome models, and with a numeric term made 0/1.
func TestBinaryEffects(t *testing.T) {
	for _, name := range effectsScenarios {
		for _, aug := range []bool{true, false} {
			for _, indicator := range []bool{false, true} {
				fx := loadEffectsFixture(t, name)
				cfg := fx.cfg
				cfg.HasOutcome = aug
				if indicator {
					x := make([]float64, fx.b.N)
					for i, v := range fx.b.X[0] {
						x[i] = float64(b2i(v > 0.2))
					}
					fx.b.X[0] = x
				}
				fast, dense := NewEffects(cfg), NewEffects(cfg)
				nBinary := 0
				var sc EffectsScratch
				for _, k := range []int{300, 129, 1000} {
					for lo := 0; lo < fx.b.N; lo += k * 3 {
						b, s := fx.rowsOf(span(lo, min(lo+k, fx.b.N)))
						if !aug {
							s.Mu0, s.Mu1 = nil, nil
						}
						fast.AddWith(b, s, &sc)
						dense.addDense(b, s)
						for _, is := range sc.bin.is {
							nBinary += b2i(is)
						}
					}
				}
				if indicator && nBinary == 0 {
					t.Fatalf("%s: no 0/1 term", name)
				}
				where := fmt.Sprintf("%s outcome=%v indicator=%v", name, aug, indicator)
				if fast.Rows != dense.Rows || fast.Degenerate != dense.Degenerate || fast.Trimmed != dense.Trimmed || fast.NoGradient || dense.NoGradient {
					t.Fatalf("%s: counts %+v, want %+v", where, *fast, *dense)
				}
				closeSums(t, where+" sum", fast.Sum, dense.Sum, 1)
				closeSums(t, where+" cross", fast.Cross, dense.Cross, 1)
				closeSums(t, where+" grad", fast.Grad, dense.Grad, nSlots)
				if t.Failed() {
					return
				}
			}
		}
	}
}

// closeSums compares compensated sums to 1e-12 relative to the largest of
// each stride-spaced series (a gradient slot's across the terms), since a
// single sum may cancel to nearly 0.
func closeSums(t *testing.T, what string, got, want []Sum, stride int) {
	t.Helper()
	if len(got) != len(want) {
		t.Fatalf("%s: %d sums, want %d", what, len(got), len(want))
	}
	for c := range got {
		scale := 0.0
		for k := c % stride; k < len(want); k += stride {
			scale = math.Max(scale, math.Abs(want[k].Value()))
		}
		if stride == 1 {
			scale = math.Abs(want[c].Value())
		}
		g, w := got[c].Value(), want[c].Value()
		if d := math.Abs(g - w); d > 1e-12*scale || math.IsNaN(g) != math.IsNaN(w) {
			t.Errorf("%s[%d] = %v, want %v (scale %g)", what, c, g, w, scale)
		}
	}
}

// TestBinaryState: a State's report, whole run and segments, is the same
// to 1e-12 with the sums over the ones of 0/1 terms as with the dense sums,
// on the fixture with its 0/1 terms x3, cat=b and cat=c, for every estimand.
func TestBinaryState(t *testing.T) {
	fx := loadFixture(t)
	for _, est := range score.Estimands {
		var reports [2]any
		for k, dense := range []bool{false, true} {
			s, err := New(fx.config(est), fixtureSchema)
			if err != nil {
				t.Fatal(err)
			}
			s.sh.dense = dense
			feed(t, s, fx.parts(t, est, []int{100, 333, 700}))
			raw, err := json.Marshal(s.Report())
			if err != nil {
				t.Fatal(err)
			}
			if err := json.Unmarshal(raw, &reports[k]); err != nil {
				t.Fatal(err)
			}
		}
		n := closeJSON(t, est, reports[0], reports[1])
		if n < 100 {
			t.Fatalf("%s: only %d numbers compared", est, n)
		}
	}
}

// closeJSON compares decoded JSON values, numbers to 1e-12 relative (or
// 1e-14 absolute, for figures that cancel to about 0), and counts them.
func closeJSON(t *testing.T, path string, got, want any) int {
	t.Helper()
	switch w := want.(type) {
	case map[string]any:
		g, ok := got.(map[string]any)
		if !ok || len(g) != len(w) {
			t.Errorf("%s: %v, want %v", path, got, want)
			return 0
		}
		n := 0
		for k := range w {
			n += closeJSON(t, path+"/"+k, g[k], w[k])
		}
		return n
	case []any:
		g, ok := got.([]any)
		if !ok || len(g) != len(w) {
			t.Errorf("%s: %v, want %v", path, got, want)
			return 0
		}
		n := 0
		for i := range w {
			n += closeJSON(t, fmt.Sprintf("%s[%d]", path, i), g[i], w[i])
		}
		return n
	case float64:
		g, ok := got.(float64)
		if !ok || math.Abs(g-w) > 1e-12*math.Max(math.Abs(g), math.Abs(w))+1e-14 {
			if !strings.HasSuffix(path, "seconds") {
				t.Errorf("%s: %v, want %v", path, got, want)
			}
		}
		return 1
	default:
		if got != want {
			t.Errorf("%s: %v, want %v", path, got, want)
		}
		return 0
	}
}
