package fit

import (
	"context"
	"math"
	"slices"
	"strings"
	"testing"
)

func TestFitLinearMatchesStatsmodels(t *testing.T) {
	// reference: statsmodels OLS of y on the terms per arm (llf with the ML
	// variance, scale = RSS/(n−p)), testdata/ref/glm/<name>.json.
	for _, name := range []string{"small", "medium", "confounded"} {
		f := loadGLMFixture(t, name)
		ref := loadGLMRef(t, name)
		if ref.Outcome == nil || ref.Outcome.Kind != "continuous" {
			t.Fatalf("%s: no continuous outcome reference", name)
		}
		for _, arm := range []struct {
			name string
			v    float64
			ref  glmRef
		}{{"treated", 1, ref.Outcome.Treated}, {"control", 0, ref.Outcome.Control}} {
			t.Run(name+"/"+arm.name, func(t *testing.T) {
				X, y := f.arm(arm.v)
				g, err := FitLinear(context.Background(), X, y, f.terms, GLMOptions{})
				if err != nil {
					t.Fatal(err)
				}
				compareGLM(t, "statsmodels "+ref.Versions["statsmodels"]+" OLS, "+name+".json "+arm.name, g, arm.ref)
				if math.Abs(g.Scale-arm.ref.Scale) > 1e-10*arm.ref.Scale {
					t.Errorf("scale %.15g, reference %.15g", g.Scale, arm.ref.Scale)
				}
				if math.Abs(g.Deviance-arm.ref.SSR) > 1e-10*arm.ref.SSR {
					t.Errorf("deviance %.15g, reference ssr %.15g", g.Deviance, arm.ref.SSR)
				}
				if g.Family != FamilyGaussian || !g.Converged || g.N != X.N {
					t.Errorf("family %q converged %v n %d", g.Family, g.Converged, g.N)
				}
			})
		}
	}
}

// An exact linear outcome is recovered to rounding (a published property of
// least squares: the residual is the projection of y off the column space)
// and the log-likelihood stays finite.
func TestFitLinearExact(t *testing.T) {
	X, _, terms := synth(500, 3, 4)
	y := make([]float64, X.N)
	want := []float64{2, -1, 0.5, 3}
	LinearPredictor(&GLM{Coef: want}, X, y)
	g, err := FitLinear(context.Background(), X, y, terms, GLMOptions{})
	if err != nil {
		t.Fatal(err)
	}
	for j := range want {
		if math.Abs(g.Coef[j]-want[j]) > 1e-12 {
			t.Errorf("coef[%d] = %v, want %v", j, g.Coef[j], want[j])
		}
	}
	// The model file is JSON: no infinities.
	if math.IsInf(g.LogLik, 0) || math.IsNaN(g.LogLik) {
		t.Errorf("loglik %v", g.LogLik)
	}
}

// Ridge on the linear model solves (Z'Z + λD) γ = Z'y; as λ grows the
// term coefficients shrink to 0 and the intercept to the mean of y.
func TestFitLinearRidgeShrinks(t *testing.T) {
	X, y, terms := synth(400, 2, 8)
	for i := range y {
		y[i] += 3 * X.Cols[0][i]
	}
	var prev float64 = math.Inf(1)
	for _, lam := range []float64{0, 1, 100, 1e4, 1e9} {
		g, err := FitLinear(context.Background(), X, y, terms, GLMOptions{Ridge: lam})
		if err != nil {
			t.Fatal(err)
		}
		if a := math.Abs(g.Coef[1]); a >= prev {
			t.Errorf("λ=%v: |β1| = %v did not shrink from %v", lam, a, prev)
		} else {
			prev = a
		}
	}
	if prev > 1e-5 {
		t.Errorf("λ=1e9 left |β1| = %v", prev)
	}
	// With ridge, a duplicated term is a warning.
	D := Design{N: X.N, Cols: append(slices.Clone(X.Cols), X.Cols[0])}
	g, err := FitLinear(context.Background(), D, y, append(slices.Clone(terms), "x1again"), GLMOptions{Ridge: 1})
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(strings.Join(g.Warnings, ";"), "x1again") {
		t.Errorf("warnings %q do not name the duplicate", g.Warnings)
	}
}

func TestLinearPredictor(t *testing.T) {
	X := Design{N: 3, Cols: [][]float64{{1, 2, 3}, {0, 1, 0}}}
	out := make([]float64, 3)
	LinearPredictor(&GLM{Coef: []float64{0.5, 2, -1}}, X, out)
	if want := []float64{2.5, 3.5, 6.5}; !slices.Equal(out, want) {
		t.Errorf("got %v, want %v", out, want)
	}
}
