package aggregate

import (
	"math"
	"testing"
)

// TestPSI checks the published properties of the index (Yurdakul 2018):
// it is 0 for identical distributions, positive otherwise, and symmetric
// in the two distributions (it is the symmetrized Kullback–Leibler
// divergence of the binned shares). The two-bin value is worked by hand.
func TestPSI(t *testing.T) {
	if got := psi([]int64{10, 20, 30}, []float64{1, 2, 3}); got != 0 {
		t.Errorf("identical shares: %v, want 0", got)
	}
	a := psi([]int64{30, 70}, []float64{50, 50})
	b := psi([]int64{50, 50}, []float64{30, 70})
	want := (0.3-0.5)*math.Log(0.3/0.5) + (0.7-0.5)*math.Log(0.7/0.5)
	if !closeTo(a, want, 1e-15) || !closeTo(b, want, 1e-15) {
		t.Errorf("psi = %v and %v, want %v both ways", a, b, want)
	}
	// an empty bin is floored at 1e-6 (common practice, no source)
	e := psi([]int64{0, 100}, []float64{50, 50})
	wantE := (psiFloor-0.5)*math.Log(psiFloor/0.5) + (1-0.5)*math.Log(1/0.5)
	if !closeTo(e, wantE, 1e-15) {
		t.Errorf("empty bin: %v, want %v", e, wantE)
	}
	if !math.IsNaN(psi([]int64{1}, []float64{1})) || !math.IsNaN(psi([]int64{0, 0}, []float64{1, 1})) || !math.IsNaN(psi([]int64{1, 2}, nil)) {
		t.Error("undefined PSI is not NaN")
	}
}

func TestMeanShift(t *testing.T) {
	if got := meanShift(3, 1, 4); got != 0.5 {
		t.Errorf("%v, want 0.5", got)
	}
	if !math.IsNaN(meanShift(3, 1, 0)) {
		t.Error("zero SD gives a number")
	}
}
