package aggregate

import (
	"math"
	"math/rand/v2"
	"testing"
)

// direct computes the moments from their definitions, in two passes.
func direct(x, w []float64) Moments {
	var sw, swx float64
	for i := range x {
		sw += w[i]
		swx += w[i] * x[i]
	}
	m := swx / sw
	var m2 float64
	for i := range x {
		m2 += w[i] * (x[i] - m) * (x[i] - m)
	}
	return Moments{W: sw, Mean: m, M2: m2}
}

func closeTo(a, b, rel float64) bool {
	return math.Abs(a-b) <= rel*math.Max(math.Abs(b), 1e-300)
}

// TestMomentsMerge checks the pairwise update (Chan, Golub & LeVeque 1979;
// West 1979) against the definitions on both sides of every kind of split,
// including a large offset that defeats the textbook one-pass formula.
func TestMomentsMerge(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	for _, c := range []struct {
		name     string
		offset   float64
		weighted bool
	}{
		{"unweighted", 0, false},
		{"weighted", 0, true},
		{"offset 1e8", 1e8, false},
		{"weighted offset 1e8", 1e8, true},
	} {
		n := 1000
		x, w := make([]float64, n), make([]float64, n)
		for i := range x {
			x[i] = c.offset + rng.NormFloat64()
			w[i] = 1
			if c.weighted {
				w[i] = rng.ExpFloat64()
			}
		}
		want := direct(x, w)
		for _, cut := range []int{0, 1, 2, 500, 999, 1000} {
			var m Moments
			for _, r := range [][2]int{{0, cut}, {cut, n}} {
				if r[0] < r[1] {
					m.Merge(direct(x[r[0]:r[1]], w[r[0]:r[1]]))
				}
			}
			// with the offset each part's mean carries an absolute error of
			// about eps·offset, which enters M2 through δ²: a relative error
			// of order eps·offset/sd, for any method
			tol := 1e-12 + 1e-15*c.offset
			if !closeTo(m.W, want.W, 1e-13) || !closeTo(m.Mean, want.Mean, 1e-13) || !closeTo(m.M2, want.M2, tol) {
				t.Errorf("%s cut %d: %+v, want %+v", c.name, cut, m, want)
			}
		}
	}
}

// TestArmMoments checks one batch's per-arm moments against the
// definitions: unweighted with divisor n − 1, weighted with divisor Σw.
func TestArmMoments(t *testing.T) {
	x := []float64{1, 2, 3, 4, 5, 6, 7, 100}
	arm := []int8{1, 0, 1, 0, 1, 0, 1, -1}
	w := []float64{1, 2, 0.5, 1, 3, 0, 2, 9}
	var u, wt [2]Moments
	var rows arms
	rows.split(arm)
	armMoments(x, &rows, w, &u, &wt)
	// treated: x = 1, 3, 5, 7; mean 4, Σ(x−4)² = 20, s² = 20/3
	if u[1].W != 4 || u[1].Mean != 4 || u[1].SampleVar() != 20.0/3 {
		t.Errorf("treated unweighted %+v", u[1])
	}
	// control: x = 2, 4, 6; mean 4, s² = 4
	if u[0].W != 3 || u[0].Mean != 4 || u[0].SampleVar() != 4 {
		t.Errorf("control unweighted %+v", u[0])
	}
	// treated weighted: Σw = 6.5, Σwx = 1 + 1.5 + 15 + 14 = 31.5
	mw := 31.5 / 6.5
	v := (1*(1-mw)*(1-mw) + 0.5*(3-mw)*(3-mw) + 3*(5-mw)*(5-mw) + 2*(7-mw)*(7-mw)) / 6.5
	if wt[1].W != 6.5 || !closeTo(wt[1].Mean, mw, 1e-15) || !closeTo(wt[1].WeightedVar(), v, 1e-14) {
		t.Errorf("treated weighted %+v, want mean %v var %v", wt[1], mw, v)
	}
	// control weighted: weights 2, 1, 0 on 2, 4, 6: mean 8/3
	if wt[0].W != 3 || !closeTo(wt[0].Mean, 8.0/3, 1e-15) {
		t.Errorf("control weighted %+v", wt[0])
	}
	if !math.IsNaN((Moments{W: 1}).SampleVar()) || !math.IsNaN((Moments{}).WeightedVar()) {
		t.Error("variance of too few rows is not NaN")
	}
}
