package fit

import (
	"context"
	"encoding/csv"
	"encoding/json"
	"errors"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"runtime"
	"slices"
	"strconv"
	"strings"
	"sync/atomic"
	"testing"
)

// glmFixture is one dataset written by testdata/gen/glm_reference.py.
type glmFixture struct {
	terms []string // "intercept" first
	cols  [][]float64
	t, y  []float64
}

func (f *glmFixture) design() Design { return Design{N: len(f.t), Cols: f.cols} }

// arm returns the design and outcome of the rows with t == arm.
func (f *glmFixture) arm(arm float64) (Design, []float64) {
	var y []float64
	cols := make([][]float64, len(f.cols))
	for i, t := range f.t {
		if t != arm {
			continue
		}
		y = append(y, f.y[i])
		for j := range f.cols {
			cols[j] = append(cols[j], f.cols[j][i])
		}
	}
	return Design{N: len(y), Cols: cols}, y
}

func loadGLMFixture(t *testing.T, name string) *glmFixture {
	t.Helper()
	fh, err := os.Open(filepath.Join("..", "testdata", "fixtures", "glm", name+".csv"))
	if err != nil {
		t.Fatal(err)
	}
	defer fh.Close()
	rows, err := csv.NewReader(fh).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	head := rows[0]
	k := len(head) - 2
	f := &glmFixture{terms: append([]string{"intercept"}, head[:k]...), cols: make([][]float64, k)}
	num := func(s string) float64 {
		v, err := strconv.ParseFloat(s, 64)
		if err != nil {
			t.Fatal(err)
		}
		return v
	}
	for _, r := range rows[1:] {
		for j := range k {
			f.cols[j] = append(f.cols[j], num(r[j]))
		}
		f.t = append(f.t, num(r[k]))
		f.y = append(f.y, num(r[k+1]))
	}
	return f
}

// glmRef is one fitted model in testdata/ref/glm/<name>.json.
type glmRef struct {
	Coef  []float64   `json:"coef"`
	BSE   []float64   `json:"bse"`
	Cov   [][]float64 `json:"cov_params"`
	LLF   float64     `json:"llf"`
	Dev   float64     `json:"deviance"`
	SSR   float64     `json:"ssr"`
	Scale float64     `json:"scale"`
	AUC   float64     `json:"auc"`
	Ridge float64     `json:"ridge"`
}

type glmRefFile struct {
	Terms      []string `json:"terms"`
	Propensity glmRef   `json:"propensity"`
	Outcome    *struct {
		Kind    string `json:"kind"`
		Treated glmRef `json:"treated"`
		Control glmRef `json:"control"`
	} `json:"outcome"`
	Versions map[string]string `json:"versions"`
}

func loadGLMRef(t *testing.T, name string) *glmRefFile {
	t.Helper()
	b, err := os.ReadFile(filepath.Join("..", "testdata", "ref", "glm", name+".json"))
	if err != nil {
		t.Fatal(err)
	}
	var r glmRefFile
	if err := json.Unmarshal(b, &r); err != nil {
		t.Fatal(err)
	}
	return &r
}

// Tolerances of the comparisons with the references: coefficients to
// relative 1e-6, standard errors and covariances to 1e-4, log-likelihoods
// to 1e-8. A coefficient is compared relative to the larger of its size and
// 1e-3 of its SE, so that a coefficient near 0 is not held to digits that
// carry no information.
const (
	coefRel = 1e-6
	seRel   = 1e-4
	llfRel  = 1e-8
)

func compareGLM(t *testing.T, src string, g *GLM, r glmRef) {
	t.Helper()
	if len(g.Coef) != len(r.Coef) {
		t.Fatalf("%s: %d coefficients, reference has %d", src, len(g.Coef), len(r.Coef))
	}
	for j := range r.Coef {
		scale := math.Max(math.Abs(r.Coef[j]), 1e-3*r.BSE[j])
		if d := math.Abs(g.Coef[j] - r.Coef[j]); d > coefRel*scale {
			t.Errorf("%s: coef[%s] = %.12g, reference %.12g (rel diff %.2g)", src, g.Terms[j], g.Coef[j], r.Coef[j], d/scale)
		}
		if d := math.Abs(g.SE[j] - r.BSE[j]); d > seRel*r.BSE[j] {
			t.Errorf("%s: se[%s] = %.12g, reference %.12g (rel diff %.2g)", src, g.Terms[j], g.SE[j], r.BSE[j], d/r.BSE[j])
		}
		for k := range r.Cov[j] {
			s := math.Sqrt(r.Cov[j][j] * r.Cov[k][k])
			if d := math.Abs(g.Cov[j][k] - r.Cov[j][k]); d > seRel*s {
				t.Errorf("%s: cov[%d][%d] = %.12g, reference %.12g", src, j, k, g.Cov[j][k], r.Cov[j][k])
			}
		}
	}
	if d := math.Abs(g.LogLik - r.LLF); d > llfRel*math.Abs(r.LLF) {
		t.Errorf("%s: loglik = %.12g, reference %.12g", src, g.LogLik, r.LLF)
	}
}

func TestFitLogisticMatchesStatsmodels(t *testing.T) {
	// reference: statsmodels GLM(family=Binomial()) (checked against
	// statsmodels Logit), testdata/ref/glm/<name>.json, versions inside.
	for _, name := range []string{"small", "medium", "confounded", "binary"} {
		t.Run(name, func(t *testing.T) {
			f := loadGLMFixture(t, name)
			ref := loadGLMRef(t, name)
			if !slices.Equal(f.terms, ref.Terms) {
				t.Fatalf("terms %q, reference %q", f.terms, ref.Terms)
			}
			g, err := FitLogistic(context.Background(), f.design(), f.t, f.terms, GLMOptions{})
			if err != nil {
				t.Fatal(err)
			}
			if !g.Converged || len(g.Warnings) > 0 {
				t.Errorf("converged %v after %d iterations, warnings %q", g.Converged, g.Iterations, g.Warnings)
			}
			compareGLM(t, "statsmodels "+ref.Versions["statsmodels"]+" GLM Binomial, "+name+".json", g, ref.Propensity)
			if d := math.Abs(g.Deviance - ref.Propensity.Dev); d > llfRel*ref.Propensity.Dev {
				t.Errorf("deviance %.12g, reference %.12g", g.Deviance, ref.Propensity.Dev)
			}
			// reference: scipy.stats.mannwhitneyu on statsmodels' fitted
			// propensities; one discordant pair moves the AUC by
			// 1/(n1·n0), far below the tolerance.
			eta := make([]float64, len(f.t))
			LinearPredictor(g, f.design(), eta)
			arm := make([]int8, len(f.t))
			for i := range eta {
				eta[i] = 1 / (1 + math.Exp(-eta[i]))
				arm[i] = int8(f.t[i])
			}
			if a := AUC(eta, arm); math.Abs(a-ref.Propensity.AUC) > 1e-6 {
				t.Errorf("AUC %.12g, reference %.12g", a, ref.Propensity.AUC)
			}
		})
	}
}

func TestFitLogisticOutcomeMatchesStatsmodels(t *testing.T) {
	// reference: statsmodels GLM Binomial of y on the terms per arm,
	// testdata/ref/glm/binary.json.
	f := loadGLMFixture(t, "binary")
	ref := loadGLMRef(t, "binary")
	for _, arm := range []struct {
		name string
		v    float64
		ref  glmRef
	}{{"treated", 1, ref.Outcome.Treated}, {"control", 0, ref.Outcome.Control}} {
		X, y := f.arm(arm.v)
		g, err := FitLogistic(context.Background(), X, y, f.terms, GLMOptions{})
		if err != nil {
			t.Fatal(err)
		}
		compareGLM(t, "statsmodels GLM Binomial outcome "+arm.name+", binary.json", g, arm.ref)
	}
}

func TestFitLogisticRidgeMatchesScipy(t *testing.T) {
	// reference: scipy.optimize.minimize (trust-exact, gtol 1e-11, then
	// Newton polishing to a gradient below 1e-13) on the exact penalized
	// negative log-likelihood with penalty (λ/2)Σ(s_j β_j)², s_j the
	// sample SD; covariance the inverse penalized Hessian, computed in
	// numpy on the original scale. testdata/ref/glm/ridge*.json.
	for _, tc := range []struct {
		name    string
		warning string
	}{{"ridge", ""}, {"ridge_separated", "quasi-complete separation"}} {
		t.Run(tc.name, func(t *testing.T) {
			f := loadGLMFixture(t, tc.name)
			ref := loadGLMRef(t, tc.name)
			g, err := FitLogistic(context.Background(), f.design(), f.t, f.terms, GLMOptions{Ridge: ref.Propensity.Ridge})
			if err != nil {
				t.Fatal(err)
			}
			compareGLM(t, "scipy "+ref.Versions["scipy"]+" penalized optimum, "+tc.name+".json", g, ref.Propensity)
			joined := strings.Join(g.Warnings, "; ")
			if tc.warning == "" && joined != "" {
				t.Errorf("unexpected warnings %q", joined)
			}
			if tc.warning != "" && (!strings.Contains(joined, tc.warning) || !strings.Contains(joined, "group=b")) {
				t.Errorf("warnings %q, want %q naming group=b", joined, tc.warning)
			}
			if g.Ridge != ref.Propensity.Ridge {
				t.Errorf("Ridge recorded as %v", g.Ridge)
			}
		})
	}
}

// synth makes invented data for the failure cases and properties: k
// standard normal terms and a treatment from a logistic model.
func synth(n, k int, seed uint64) (Design, []float64, []string) {
	rng := rand.New(rand.NewPCG(seed, 1))
	cols := make([][]float64, k)
	terms := []string{"intercept"}
	for j := range cols {
		cols[j] = make([]float64, n)
		for i := range cols[j] {
			cols[j][i] = rng.NormFloat64()
		}
		terms = append(terms, "x"+strconv.Itoa(j+1))
	}
	y := make([]float64, n)
	for i := range y {
		eta := 0.2
		for j := range cols {
			eta += 0.3 * cols[j][i] / float64(j+1)
		}
		if rng.Float64() < 1/(1+math.Exp(-eta)) {
			y[i] = 1
		}
	}
	return Design{N: n, Cols: cols}, y, terms
}

func TestFitErrors(t *testing.T) {
	base, y, terms := synth(300, 3, 7)
	with := func(extra []float64, name string) (Design, []string) {
		return Design{N: base.N, Cols: append(slices.Clone(base.Cols), extra)}, append(slices.Clone(terms), name)
	}
	dupX, dupTerms := with(slices.Clone(base.Cols[1]), "x2copy")
	konst := make([]float64, base.N)
	for i := range konst {
		konst[i] = 4
	}
	constX, constTerms := with(konst, "four")
	// A complete dummy set: three levels, all three as terms.
	lev := [3][]float64{make([]float64, base.N), make([]float64, base.N), make([]float64, base.N)}
	for i := range base.N {
		lev[i%3][i] = 1
	}
	dumX := Design{N: base.N, Cols: append(slices.Clone(base.Cols), lev[0], lev[1], lev[2])}
	dumTerms := append(slices.Clone(terms), "g=a", "g=b", "g=c")
	// Complete separation by x1; quasi-complete: g=b rows are all treated.
	sepY := make([]float64, base.N)
	quasiY := slices.Clone(y)
	for i, v := range base.Cols[0] {
		if v > 0.1 {
			sepY[i] = 1
		}
		if lev[1][i] == 1 {
			quasiY[i] = 1
		}
	}
	quasiX := Design{N: base.N, Cols: append(slices.Clone(base.Cols), lev[1])}
	quasiTerms := append(slices.Clone(terms), "g=b")
	ones := make([]float64, base.N)
	for i := range ones {
		ones[i] = 1
	}
	one := Design{N: 1, Cols: [][]float64{{0.5}}}
	few := Design{N: 3, Cols: [][]float64{{1, 2, 3}, {3, 1, 2}, {0, 1, 0}, {5, 5, 6}}}
	nan := Design{N: base.N, Cols: slices.Clone(base.Cols)}
	nan.Cols[2] = slices.Clone(nan.Cols[2])
	nan.Cols[2][17] = math.NaN()
	notBinary := slices.Clone(y)
	notBinary[5] = 2

	cases := []struct {
		name   string
		linear bool
		X      Design
		y      []float64
		terms  []string
		reason string
		names  []string
		detail string
	}{
		{"duplicate column", false, dupX, y, dupTerms, ReasonCollinear, []string{"x2", "x2copy"}, ""},
		{"duplicate column linear", true, dupX, y, dupTerms, ReasonCollinear, []string{"x2", "x2copy"}, ""},
		{"constant column", false, constX, y, constTerms, ReasonCollinear, []string{"four"}, "constant"},
		{"constant column linear", true, constX, y, constTerms, ReasonCollinear, []string{"four"}, "constant"},
		{"dummies sum to intercept", false, dumX, y, dumTerms, ReasonCollinear, []string{"g=a", "g=b", "g=c"}, ""},
		{"dummies sum to intercept linear", true, dumX, y, dumTerms, ReasonCollinear, []string{"g=a", "g=b", "g=c"}, ""},
		{"complete separation", false, base, sepY, terms, ReasonCompleteSeparation, []string{"x1"}, ""},
		{"quasi-complete separation", false, quasiX, quasiY, quasiTerms, ReasonQuasiCompleteSeparation, []string{"g=b"}, ""},
		{"one row", false, one, []float64{1}, []string{"intercept", "x"}, ReasonOneRow, nil, ""},
		{"one row linear", true, one, []float64{1}, []string{"intercept", "x"}, ReasonOneRow, nil, ""},
		{"more terms than rows", false, few, []float64{0, 1, 1}, []string{"intercept", "a", "b", "c", "d"}, ReasonTooFewRows, nil, "5 terms, 3 rows"},
		{"more terms than rows linear", true, few, []float64{0, 1, 1}, []string{"intercept", "a", "b", "c", "d"}, ReasonTooFewRows, nil, "5 terms, 3 rows"},
		{"outcome constant", false, base, ones, terms, ReasonNoVariation, nil, "all 300 rows are 1"},
		{"outcome not binary", false, base, notBinary, terms, ReasonNotBinary, nil, "row 5"},
		{"NaN in a term", false, nan, y, terms, ReasonNonFinite, []string{"x3"}, "row 17"},
		{"NaN in a term linear", true, nan, y, terms, ReasonNonFinite, []string{"x3"}, "row 17"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			var err error
			if tc.linear {
				_, err = FitLinear(context.Background(), tc.X, tc.y, tc.terms, GLMOptions{})
			} else {
				_, err = FitLogistic(context.Background(), tc.X, tc.y, tc.terms, GLMOptions{})
			}
			checkFitError(t, err, tc.reason, tc.names, tc.detail)
		})
	}
}

func checkFitError(t *testing.T, err error, reason string, names []string, detail string) {
	t.Helper()
	var fe *FitError
	if !errors.As(err, &fe) {
		t.Fatalf("error %v, want a *FitError", err)
	}
	msg := err.Error()
	if fe.Reason != reason || !strings.Contains(msg, reason) {
		t.Errorf("error %q, want reason %q", msg, reason)
	}
	if !slices.Equal(fe.Terms, names) {
		t.Errorf("error %q names terms %q, want %q", msg, fe.Terms, names)
	}
	for _, n := range names {
		if !strings.Contains(msg, strconv.Quote(n)) {
			t.Errorf("message %q does not name %q", msg, n)
		}
	}
	if !strings.Contains(msg, detail) {
		t.Errorf("message %q does not say %q", msg, detail)
	}
	if strings.Contains(msg, "\n") {
		t.Errorf("message %q is not one line", msg)
	}
}

// Separation that no single term shows is found after Newton's method.
func TestFitLogisticSeparationAfterNewton(t *testing.T) {
	base, y, terms := synth(400, 3, 9)
	sep := make([]float64, base.N)
	quasi := slices.Clone(y)
	// Integer-valued terms so that ties on the separating line are exact.
	a := make([]float64, base.N)
	b := make([]float64, base.N)
	for i := range base.N {
		a[i] = math.Round(2 * base.Cols[0][i])
		b[i] = math.Round(2 * base.Cols[1][i])
		if a[i]+b[i] > 0 {
			sep[i], quasi[i] = 1, 1
		} else if a[i]+b[i] < 0 {
			sep[i], quasi[i] = 0, 0
		} else {
			sep[i] = 0
		}
	}
	X := Design{N: base.N, Cols: [][]float64{a, b, base.Cols[2]}}
	for _, tc := range []struct {
		name   string
		y      []float64
		reason string
		names  []string
	}{
		{"complete", sep, ReasonCompleteSeparation, []string{"x1", "x2"}},
		{"quasi-complete", quasi, ReasonQuasiCompleteSeparation, []string{"x1", "x2"}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			for _, screen := range []bool{false, true} {
				_, err := fitLogistic(context.Background(), X, tc.y, terms, GLMOptions{}, screen)
				checkFitError(t, err, tc.reason, tc.names, "")
			}
		})
	}
}

// A row fitted at the boundary because its term is extreme, not because
// the data separate, is no separation: the steps still shrink and the
// other rows identify every term.
func TestFitLogisticBoundaryOutlierIsNotSeparation(t *testing.T) {
	X, y, terms := synth(500, 2, 6)
	X.Cols[0] = slices.Clone(X.Cols[0])
	X.Cols[0][10], y[10] = 80, 1 // η ≈ 0.3·80 = 24
	g, err := FitLogistic(context.Background(), X, y, terms, GLMOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if !g.Converged || len(g.Warnings) > 0 {
		t.Errorf("converged %v warnings %q", g.Converged, g.Warnings)
	}
}

// With ridge, collinear and constant terms are warnings, not errors.
func TestFitLogisticRidgeWarnings(t *testing.T) {
	base, y, terms := synth(300, 2, 3)
	konst := make([]float64, base.N)
	for i := range konst {
		konst[i] = 1
	}
	X := Design{N: base.N, Cols: append(slices.Clone(base.Cols), slices.Clone(base.Cols[0]), konst)}
	g, err := FitLogistic(context.Background(), X, y, append(slices.Clone(terms), "x1copy", "one"), GLMOptions{Ridge: 0.5})
	if err != nil {
		t.Fatal(err)
	}
	w := strings.Join(g.Warnings, "; ")
	for _, want := range []string{"collinear", `"x1"`, `"x1copy"`, "constant", `"one"`} {
		if !strings.Contains(w, want) {
			t.Errorf("warnings %q lack %s", w, want)
		}
	}
	// The ridge splits a duplicated term's effect equally; the constant
	// term gets 0.
	if d := math.Abs(g.Coef[1] - g.Coef[3]); d > 1e-8 {
		t.Errorf("duplicate coefficients %v and %v differ", g.Coef[1], g.Coef[3])
	}
	if g.Coef[4] != 0 || g.SE[4] != 0 {
		t.Errorf("constant term coef %v se %v, want 0", g.Coef[4], g.SE[4])
	}
}

// Results do not depend on the number of goroutines: chunks are summed in
// a fixed order.
func TestFitDeterministicAcrossGOMAXPROCS(t *testing.T) {
	X, y, terms := synth(3*chunkRows+123, 4, 11)
	prev := runtime.GOMAXPROCS(1)
	defer runtime.GOMAXPROCS(prev)
	g1, err := FitLogistic(context.Background(), X, y, terms, GLMOptions{})
	if err != nil {
		t.Fatal(err)
	}
	runtime.GOMAXPROCS(4)
	g4, err := FitLogistic(context.Background(), X, y, terms, GLMOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if !slices.Equal(g1.Coef, g4.Coef) || !slices.Equal(g1.SE, g4.SE) || g1.LogLik != g4.LogLik {
		t.Errorf("GOMAXPROCS 1: %v %v; 4: %v %v", g1.Coef, g1.LogLik, g4.Coef, g4.LogLik)
	}
}

// The maximum-likelihood fit is equivariant under affine changes of a term
// (a published property of the MLE): x → a + b·x gives β → β/b with the
// intercept absorbing the shift, and the same log-likelihood.
func TestFitLogisticAffineEquivariance(t *testing.T) {
	X, y, terms := synth(2000, 3, 5)
	g, err := FitLogistic(context.Background(), X, y, terms, GLMOptions{})
	if err != nil {
		t.Fatal(err)
	}
	shifted := make([]float64, X.N)
	for i, v := range X.Cols[1] {
		shifted[i] = 1e6 + 1e4*v
	}
	Y := Design{N: X.N, Cols: [][]float64{X.Cols[0], shifted, X.Cols[2]}}
	h, err := FitLogistic(context.Background(), Y, y, terms, GLMOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if d := math.Abs(h.Coef[2]*1e4 - g.Coef[2]); d > 1e-9*math.Abs(g.Coef[2]) {
		t.Errorf("scaled coefficient %v, want %v", h.Coef[2]*1e4, g.Coef[2])
	}
	if d := math.Abs(h.SE[2]*1e4 - g.SE[2]); d > 1e-9*g.SE[2] {
		t.Errorf("scaled SE %v, want %v", h.SE[2]*1e4, g.SE[2])
	}
	if d := math.Abs(h.LogLik - g.LogLik); d > 1e-9*math.Abs(g.LogLik) {
		t.Errorf("loglik %v, want %v", h.LogLik, g.LogLik)
	}
}

func TestFitLogisticCancelled(t *testing.T) {
	X, y, terms := synth(1000, 2, 1)
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if _, err := FitLogistic(ctx, X, y, terms, GLMOptions{}); !errors.Is(err, context.Canceled) {
		t.Errorf("error %v, want context.Canceled", err)
	}
}

// countdownCtx reports cancellation after its Err has been asked n times,
// to cancel in the middle of a fit.
type countdownCtx struct {
	context.Context
	n atomic.Int64
}

func (c *countdownCtx) Err() error {
	if c.n.Add(-1) < 0 {
		return context.Canceled
	}
	return nil
}

func TestFitCancelledMidway(t *testing.T) {
	X, y, terms := synth(4*chunkRows, 3, 1)
	for _, after := range []int64{3, 10, 20} {
		ctx := &countdownCtx{Context: context.Background()}
		ctx.n.Store(after)
		if _, err := FitLogistic(ctx, X, y, terms, GLMOptions{}); !errors.Is(err, context.Canceled) {
			t.Errorf("logistic, cancelled after %d checks: error %v", after, err)
		}
		if after > 8 {
			continue // a linear fit asks fewer times
		}
		ctx.n.Store(after)
		if _, err := FitLinear(ctx, X, y, terms, GLMOptions{}); !errors.Is(err, context.Canceled) {
			t.Errorf("linear, cancelled after %d checks: error %v", after, err)
		}
	}
}

func TestFitLogisticIterationCap(t *testing.T) {
	X, y, terms := synth(1000, 2, 2)
	g, err := FitLogistic(context.Background(), X, y, terms, GLMOptions{MaxIter: 1})
	if err != nil {
		t.Fatal(err)
	}
	if g.Converged || g.Iterations != 1 || len(g.Warnings) == 0 {
		t.Errorf("converged %v iterations %d warnings %q", g.Converged, g.Iterations, g.Warnings)
	}
}

// BenchmarkFitLogistic1M is the benchmark: 1,000,000 rows × 20
// numeric terms.
func BenchmarkFitLogistic1M(b *testing.B) {
	X, y, terms := synth(1_000_000, 20, 42)
	b.ReportAllocs()
	b.ResetTimer()
	var iters int
	for b.Loop() {
		g, err := FitLogistic(context.Background(), X, y, terms, GLMOptions{})
		if err != nil {
			b.Fatal(err)
		}
		iters = g.Iterations
	}
	b.ReportMetric(float64(iters), "iterations")
}
