package score

import (
	"math"
	"strings"
	"testing"
)

// TestWeight checks every estimand against its published formula written
// out per row with T as a float (Horvitz & Thompson 1952; Hirano, Imbens &
// Ridder 2003; Li, Morgan & Zaslavsky 2018).
func TestWeight(t *testing.T) {
	formula := map[string]func(T, e float64) float64{
		ATE:     func(T, e float64) float64 { return T/e + (1-T)/(1-e) },
		ATT:     func(T, e float64) float64 { return T + (1-T)*e/(1-e) },
		ATC:     func(T, e float64) float64 { return T*(1-e)/e + (1 - T) },
		Overlap: func(T, e float64) float64 { return T*(1-e) + (1-T)*e },
	}
	es := []float64{1e-9, 0.003, 0.1, 0.25, 0.5, 0.61, 0.9, 0.999, 1 - 1e-9}
	for _, est := range Estimands {
		for _, tr := range []int8{0, 1} {
			for _, e := range es {
				got := Weight(est, tr, e)
				want := formula[est](float64(tr), e)
				if !near(got, want, 1e-12) {
					t.Errorf("Weight(%s, %d, %v) = %v, want %v", est, tr, e, got, want)
				}
			}
		}
	}
}

func TestWeightInvalid(t *testing.T) {
	for _, c := range []struct {
		est string
		t   int8
	}{{"ate", -1}, {"ate", 2}, {"xyz", 1}, {"", 0}} {
		if w := Weight(c.est, c.t, 0.3); !math.IsNaN(w) {
			t.Errorf("Weight(%q, %d) = %v, want NaN", c.est, c.t, w)
		}
	}
}

func TestValidate(t *testing.T) {
	for _, c := range []struct {
		p    Policy
		want string // substring of the error; "" = valid
	}{
		{Policy{Estimand: ATE}, ""},
		{Policy{Estimand: Overlap, Stabilize: true, Clip: 0.01, Trim: 0.1, TruncateQ: 0.99}, ""},
		{Policy{Estimand: ATT, TruncateQ: 1}, ""},
		{Policy{Estimand: "ATE"}, "--estimand"},
		{Policy{}, "--estimand"},
		{Policy{Estimand: ATE, Clip: 0.5}, "--clip"},
		{Policy{Estimand: ATE, Clip: -0.1}, "--clip"},
		{Policy{Estimand: ATE, Clip: math.NaN()}, "--clip"},
		{Policy{Estimand: ATE, Trim: 0.5}, "--trim"},
		{Policy{Estimand: ATE, Trim: -1e-9}, "--trim"},
		{Policy{Estimand: ATE, TruncateQ: 1.01}, "--truncate-quantile"},
		{Policy{Estimand: ATE, TruncateQ: -0.5}, "--truncate-quantile"},
		{Policy{Estimand: ATE, Cap: math.Inf(1)}, "cap"},
	} {
		err := c.p.Validate()
		switch {
		case c.want == "" && err != nil:
			t.Errorf("%+v: unexpected error %v", c.p, err)
		case c.want != "" && (err == nil || !strings.Contains(err.Error(), c.want)):
			t.Errorf("%+v: error %v, want one naming %s", c.p, err, c.want)
		}
	}
}

// near reports |a−b| ≤ tol·max(|a|, |b|, 1e-3): relative, with an
// absolute floor so values near zero are not held to an impossible bound.
func near(a, b, tol float64) bool {
	if a == b {
		return true
	}
	scale := math.Max(math.Max(math.Abs(a), math.Abs(b)), 1e-3)
	return math.Abs(a-b) <= tol*scale
}
