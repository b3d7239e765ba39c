package aggregate

import (
	"math"
	"testing"
)

// TestSum checks Neumaier summation on sums whose exact value is known.
// [1, 1e100, 1, −1e100] sums to exactly 2; Kahan's compensation gives 0 and
// plain summation 0 (a standard example for Neumaier's improvement).
func TestSum(t *testing.T) {
	for _, c := range []struct {
		name string
		x    []float64
		want float64
	}{
		{"empty", nil, 0},
		{"big cancels", []float64{1, 1e100, 1, -1e100}, 2},
		{"tenths", repeat(0.1, 10), 1},
		{"small after big", append([]float64{1e16}, append(repeat(1, 1000), -1e16)...), 1000},
	} {
		var s Sum
		for _, v := range c.x {
			s.Add(v)
		}
		if got := s.Value(); got != c.want {
			t.Errorf("%s: %v, want %v", c.name, got, c.want)
		}
		// any split merges to the same value
		for cut := 0; cut <= len(c.x); cut++ {
			var a, b Sum
			for _, v := range c.x[:cut] {
				a.Add(v)
			}
			for _, v := range c.x[cut:] {
				b.Add(v)
			}
			a.Merge(b)
			if got := a.Value(); got != c.want {
				t.Errorf("%s split at %d: %v, want %v", c.name, cut, got, c.want)
			}
		}
	}
}

func repeat(v float64, n int) []float64 {
	x := make([]float64, n)
	for i := range x {
		x[i] = v
	}
	return x
}

func TestSumMergeEmpty(t *testing.T) {
	var s Sum
	for _, v := range []float64{0.1, 0.2, 0.3, 1e-17} {
		s.Add(v)
	}
	a, b := s, Sum{}
	a.Merge(Sum{})
	b.Merge(s)
	if a != s || b != s {
		t.Errorf("merge with empty: %+v and %+v, want %+v", a, b, s)
	}
	if math.IsNaN(s.Value()) {
		t.Fatal("NaN")
	}
}
