package aggregate

import (
	"context"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"github.com/heft-project/heft/fit"
	"github.com/heft-project/heft/score"
)

// Published simulation designs with known truth, run through fit's model
// fitters and Effects. Seeded, a few thousand rows and a few dozen
// replications each, well under a second or two.

func expit(x float64) float64 { return 1 / (1 + math.Exp(-x)) }

// linearPredict is β0 + Σ_j β_j cols[j][i].
func linearPredict(coef []float64, cols [][]float64, i int) float64 {
	v := coef[0]
	for j, c := range cols {
		v += coef[j+1] * c[i]
	}
	return v
}

func termNames(p int) []string {
	t := []string{"intercept"}
	for j := 1; j <= p; j++ {
		t = append(t, "x"+string(rune('0'+j)))
	}
	return t
}

// fitPropensity fits the logistic propensity model on cols and returns e.
func fitPropensity(t testing.TB, cols [][]float64, tr []int8) []float64 {
	t.Helper()
	n := len(tr)
	y := make([]float64, n)
	for i, v := range tr {
		y[i] = float64(v)
	}
	g, err := fit.FitLogistic(context.Background(), fit.Design{N: n, Cols: cols}, y, termNames(len(cols)), fit.GLMOptions{})
	if err != nil {
		t.Fatal(err)
	}
	e := make([]float64, n)
	for i := range e {
		e[i] = expit(linearPredict(g.Coef, cols, i))
	}
	return e
}

// fitArm fits a linear outcome model on the rows of one arm and predicts it
// for every row.
func fitArm(t testing.TB, cols [][]float64, tr []int8, y []float64, arm int8) []float64 {
	t.Helper()
	var sub [][]float64 = make([][]float64, len(cols))
	var ys []float64
	for i, v := range tr {
		if v != arm {
			continue
		}
		ys = append(ys, y[i])
		for j, c := range cols {
			sub[j] = append(sub[j], c[i])
		}
	}
	g, err := fit.FitLinear(context.Background(), fit.Design{N: len(ys), Cols: sub}, ys, termNames(len(cols)), fit.GLMOptions{})
	if err != nil {
		t.Fatal(err)
	}
	mu := make([]float64, len(tr))
	for i := range mu {
		mu[i] = linearPredict(g.Coef, cols, i)
	}
	return mu
}

// runEffects feeds one simulated data set to a fresh Effects whose run
// estimand is est (weights as written: score.Weight of e).
func runEffects(est string, x [][]float64, tr []int8, y, e, mu0, mu1 []float64) map[string]map[string]Estimate {
	n := len(tr)
	b := &fit.Batch{N: n, X: x, T: tr, Y: y, YValid: make([]bool, n)}
	s := &score.Scores{N: n, E: e, W: make([]float64, n), WValid: make([]bool, n), InSupport: make([]bool, n), Mu0: mu0, Mu1: mu1}
	for i := range tr {
		b.YValid[i], s.WValid[i], s.InSupport[i] = true, true, true
		s.W[i] = score.Weight(est, tr[i], e[i])
	}
	a := NewEffects(EffectsConfig{Policy: score.Policy{Estimand: est}, HasOutcome: mu0 != nil, OutcomeKind: "continuous", NTerms: len(x) + 1})
	a.Add(b, s)
	return a.Estimates(nil)
}

// mcSummary is the Monte Carlo mean and its standard error.
func mcSummary(v []float64) (mean, mcse float64) {
	for _, x := range v {
		mean += x
	}
	mean /= float64(len(v))
	ss := 0.0
	for _, x := range v {
		ss += (x - mean) * (x - mean)
	}
	return mean, math.Sqrt(ss / float64(len(v)-1) / float64(len(v)))
}

// kangSchafer draws one data set of the design of Kang & Schafer (2007,
// "Demystifying double robustness", Statistical Science 22:523–539),
// reproduced from memory: Z ~ N(0, I₄), Y = 210 + 27.4Z₁ + 13.7(Z₂+Z₃+Z₄) + ε,
// ε ~ N(0,1), response (here: treatment) probability
// expit(−Z₁ + 0.5Z₂ − 0.25Z₃ − 0.1Z₄), and the observed, misspecifying
// covariates X₁ = exp(Z₁/2), X₂ = Z₂/(1+exp(Z₁)) + 10, X₃ = (Z₁Z₃/25 + 0.6)³,
// X₄ = (Z₂+Z₄+20)². Their target is the mean of Y, 210, with Y seen only
// when T = 1; as a causal problem Y(1) = Y and Y(0) ≡ 0, so the ATE is 210
// and the HT, Hájek and AIPW ATE estimators are their IPW-POP, IPW-NR and
// BC-OLS estimators of the mean.
func kangSchafer(rng *rand.Rand, n int) (z, x [][]float64, tr []int8, y []float64) {
	z, x = make([][]float64, 4), make([][]float64, 4)
	for j := range z {
		z[j], x[j] = make([]float64, n), make([]float64, n)
	}
	tr, y = make([]int8, n), make([]float64, n)
	for i := 0; i < n; i++ {
		for j := range z {
			z[j][i] = rng.NormFloat64()
		}
		z1, z2, z3, z4 := z[0][i], z[1][i], z[2][i], z[3][i]
		yy := 210 + 27.4*z1 + 13.7*(z2+z3+z4) + rng.NormFloat64()
		if rng.Float64() < expit(-z1+0.5*z2-0.25*z3-0.1*z4) {
			tr[i] = 1
			y[i] = yy
		}
		x[0][i] = math.Exp(z1 / 2)
		x[1][i] = z2/(1+math.Exp(z1)) + 10
		x[2][i] = math.Pow(z1*z3/25+0.6, 3)
		x[3][i] = (z2 + z4 + 20) * (z2 + z4 + 20)
	}
	return z, x, tr, y
}

// TestKangSchaferDoubleRobustness: with the propensity model on Z (correct)
// HT, Hájek and AIPW land within 3 Monte Carlo SEs of the true 210; with it
// on X (misspecified, as in Kang & Schafer) but the outcome model on Z
// (correct), AIPW still does while Hájek is biased by more than 3 Monte
// Carlo SEs (with this seed it is about +5, z ≈ 5.7).
func TestKangSchaferDoubleRobustness(t *testing.T) {
	const (
		n     = 1000
		reps  = 100
		truth = 210.0
	)
	rng := rand.New(rand.NewPCG(2007, 523))
	est := map[string]map[string][]float64{"correct": {}, "misspecified": {}}
	for r := 0; r < reps; r++ {
		z, x, tr, y := kangSchafer(rng, n)
		mu1 := fitArm(t, z, tr, y, 1)
		mu0 := make([]float64, n) // Y(0) ≡ 0
		for name, cols := range map[string][][]float64{"correct": z, "misspecified": x} {
			e := fitPropensity(t, cols, tr)
			got := runEffects(score.ATE, cols, tr, y, e, mu0, mu1)[score.ATE]
			for _, k := range []string{EstimatorIPW, EstimatorHajek, EstimatorAIPW} {
				est[name][k] = append(est[name][k], got[k].Estimate)
			}
		}
	}
	for _, c := range []struct {
		ps, estimator string
		unbiased      bool
	}{
		{"correct", EstimatorIPW, true},
		{"correct", EstimatorHajek, true},
		{"correct", EstimatorAIPW, true},
		{"misspecified", EstimatorAIPW, true},
		{"misspecified", EstimatorHajek, false},
	} {
		mean, mcse := mcSummary(est[c.ps][c.estimator])
		z := (mean - truth) / mcse
		t.Logf("propensity %s, %s: mean %.3f, Monte Carlo SE %.3f, z %.2f", c.ps, c.estimator, mean, mcse, z)
		if c.unbiased && math.Abs(z) > 3 {
			t.Errorf("propensity %s, %s: mean %.3f is %.1f Monte Carlo SEs from %v", c.ps, c.estimator, mean, z, truth)
		}
		if !c.unbiased && math.Abs(z) <= 3 {
			t.Errorf("propensity %s, %s: mean %.3f only %.1f Monte Carlo SEs from %v; expected a clear bias", c.ps, c.estimator, mean, z, truth)
		}
	}
}

// constantEffect draws a simple design of our own (invented, not from a
// paper): X₁, X₂ ~ N(0,1), logit e = −0.2 + 0.5X₁ − 0.4X₂,
// Y = 1 + X₁ + 0.5X₂ + 2T + ε, ε ~ N(0,1). The unit-level effect is the
// constant 2, so every weighted average effect — ATE, ATT, ATC and the
// overlap-weighted one — equals 2 (a mathematical property, whatever the
// weights).
func constantEffect(rng *rand.Rand, n int) (x [][]float64, tr []int8, y []float64) {
	x = [][]float64{make([]float64, n), make([]float64, n)}
	tr, y = make([]int8, n), make([]float64, n)
	for i := 0; i < n; i++ {
		x1, x2 := rng.NormFloat64(), rng.NormFloat64()
		x[0][i], x[1][i] = x1, x2
		if rng.Float64() < expit(-0.2+0.5*x1-0.4*x2) {
			tr[i] = 1
		}
		y[i] = 1 + x1 + 0.5*x2 + 2*float64(tr[i]) + rng.NormFloat64()
	}
	return x, tr, y
}

// TestConstantEffectCoverage: over replications of the constant-effect
// design with fitted (correct) models, every estimator of every estimand
// is within 3 Monte Carlo SEs of 2, and its 95% interval from the
// influence-function SE (models treated as fixed) covers 2 in between 88%
// and 100% of replications (a loose bound: 200 replications give a
// binomial SE of 1.5 points, and ignoring the propensity fit is
// conservative for IPW, Lunceford & Davidian 2004).
func TestConstantEffectCoverage(t *testing.T) {
	const (
		n     = 800
		reps  = 200
		truth = 2.0
	)
	rng := rand.New(rand.NewPCG(2004, 2937))
	vals := map[string][]float64{}
	cover := map[string]int{}
	for r := 0; r < reps; r++ {
		x, tr, y := constantEffect(rng, n)
		e := fitPropensity(t, x, tr)
		mu0, mu1 := fitArm(t, x, tr, y, 0), fitArm(t, x, tr, y, 1)
		for _, est := range score.Estimands {
			for k, v := range runEffects(est, x, tr, y, e, mu0, mu1)[est] {
				key := est + "/" + k
				vals[key] = append(vals[key], v.Estimate)
				if v.CILow <= truth && truth <= v.CIHigh {
					cover[key]++
				}
			}
		}
	}
	if len(vals) != 11 {
		t.Fatalf("%d estimand/estimator pairs, want 11: %v", len(vals), keys(vals))
	}
	for _, key := range keys(vals) {
		mean, mcse := mcSummary(vals[key])
		cov := float64(cover[key]) / reps
		t.Logf("%-16s mean %.4f, Monte Carlo SE %.4f, coverage %.3f", key, mean, mcse, cov)
		if z := (mean - truth) / mcse; math.Abs(z) > 3 {
			t.Errorf("%s: mean %.4f is %.1f Monte Carlo SEs from %v", key, mean, z, truth)
		}
		if cov < 0.88 {
			t.Errorf("%s: 95%% interval covers the truth in %.1f%% of replications", key, 100*cov)
		}
	}
}

// TestConstantEffectDoubleRobustness: in the constant-effect design with the
// propensity model missing X₂ (misspecified) and the outcome models correct,
// AIPW stays within 3 Monte Carlo SEs of 2 for every estimand while Hájek,
// whose weights leave X₂ unbalanced, is off by more than 3 (the doubly
// robust property; the truth 2 holds for any weights because the effect is
// constant).
func TestConstantEffectDoubleRobustness(t *testing.T) {
	const (
		n     = 800
		reps  = 40
		truth = 2.0
	)
	rng := rand.New(rand.NewPCG(2019, 2439))
	vals := map[string][]float64{}
	for r := 0; r < reps; r++ {
		x, tr, y := constantEffect(rng, n)
		e := fitPropensity(t, x[:1], tr)
		mu0, mu1 := fitArm(t, x, tr, y, 0), fitArm(t, x, tr, y, 1)
		for _, est := range score.Estimands {
			got := runEffects(est, x, tr, y, e, mu0, mu1)[est]
			for _, k := range []string{EstimatorHajek, EstimatorAIPW} {
				vals[est+"/"+k] = append(vals[est+"/"+k], got[k].Estimate)
			}
		}
	}
	for _, key := range keys(vals) {
		mean, mcse := mcSummary(vals[key])
		z := (mean - truth) / mcse
		t.Logf("%-16s mean %.4f, Monte Carlo SE %.4f, z %.1f", key, mean, mcse, z)
		aipw := strings.HasSuffix(key, "/"+EstimatorAIPW)
		if aipw && math.Abs(z) > 3 {
			t.Errorf("%s: mean %.4f is %.1f Monte Carlo SEs from %v", key, mean, z, truth)
		}
		if !aipw && math.Abs(z) <= 3 {
			t.Errorf("%s: mean %.4f only %.1f Monte Carlo SEs from %v; expected a clear bias", key, mean, z, truth)
		}
	}
}
