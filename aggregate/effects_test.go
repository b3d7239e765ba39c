package aggregate

import (
	"encoding/csv"
	"encoding/json"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"sort"
	"strconv"
	"testing"

	"github.com/heft-project/heft/fit"
	"github.com/heft-project/heft/score"
)

// effectsFixture is one scenario written by testdata/gen/effects_reference.py.
type effectsFixture struct {
	b     fit.Batch
	s     score.Scores
	cfg   EffectsConfig
	model fit.Model
}

type fixtureModel struct {
	Policy       score.Policy `json:"policy"`
	OutcomeKind  string       `json:"outcome_kind"`
	ShareTreated float64      `json:"share_treated"`
	Propensity   fixtureGLM   `json:"propensity"`
	Treated      fixtureGLM   `json:"treated"`
	Control      fixtureGLM   `json:"control"`
}

type fixtureGLM struct {
	Coef []float64   `json:"coef"`
	Cov  [][]float64 `json:"cov"`
}

type refEstimates struct {
	RowsUsed  int64                                    `json:"rows_used"`
	Estimates map[string]map[string]map[string]float64 `json:"estimates"`
}

func readJSON(t testing.TB, path string, v any) {
	t.Helper()
	raw, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(raw, v); err != nil {
		t.Fatalf("%s: %v", path, err)
	}
}

func loadEffectsFixture(t testing.TB, name string) *effectsFixture {
	t.Helper()
	dir := filepath.Join("..", "testdata", "fixtures", "effects")
	var m fixtureModel
	readJSON(t, filepath.Join(dir, name+".json"), &m)
	f, err := os.Open(filepath.Join(dir, name+".csv"))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	recs, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	col := map[string]int{}
	for j, h := range recs[0] {
		col[h] = j
	}
	rows := recs[1:]
	n := len(rows)
	get := func(i int, name string) float64 {
		v, err := strconv.ParseFloat(rows[i][col[name]], 64)
		if err != nil {
			t.Fatalf("row %d column %s: %v", i, name, err)
		}
		return v
	}
	fx := &effectsFixture{}
	b, s := &fx.b, &fx.s
	b.N, s.N = n, n
	b.X = [][]float64{make([]float64, n), make([]float64, n), make([]float64, n)}
	b.T, b.Y, b.YValid = make([]int8, n), make([]float64, n), make([]bool, n)
	s.E, s.W, s.WValid, s.InSupport = make([]float64, n), make([]float64, n), make([]bool, n), make([]bool, n)
	s.Mu0, s.Mu1 = make([]float64, n), make([]float64, n)
	for i := range rows {
		for j, c := range []string{"x1", "x2", "x3"} {
			b.X[j][i] = get(i, c)
		}
		b.T[i] = int8(get(i, "t"))
		b.Y[i] = get(i, "y")
		b.YValid[i] = get(i, "y_valid") == 1
		s.E[i], s.W[i] = get(i, "e"), get(i, "w")
		s.WValid[i] = b.T[i] >= 0
		s.InSupport[i] = get(i, "in_support") == 1
		s.Mu0[i], s.Mu1[i] = get(i, "mu0"), get(i, "mu1")
	}
	fx.cfg = EffectsConfig{Policy: m.Policy, HasOutcome: true, OutcomeKind: m.OutcomeKind, NTerms: len(m.Propensity.Coef)}
	family := fit.FamilyGaussian
	if m.OutcomeKind == "binary" {
		family = fit.FamilyBinomial
	}
	fx.model = fit.Model{
		Propensity: fit.GLM{Family: fit.FamilyBinomial, Coef: m.Propensity.Coef, Cov: m.Propensity.Cov},
		Outcome: &fit.OutcomeModels{Kind: m.OutcomeKind,
			Treated: fit.GLM{Family: family, Coef: m.Treated.Coef, Cov: m.Treated.Cov},
			Control: fit.GLM{Family: family, Coef: m.Control.Coef, Cov: m.Control.Cov}},
		Reference: fit.Reference{ShareTreated: m.ShareTreated},
	}
	return fx
}

// rowsOf gathers the given rows of the fixture into a new batch.
func (fx *effectsFixture) rowsOf(idx []int) (*fit.Batch, *score.Scores) {
	n := len(idx)
	b := &fit.Batch{N: n, X: make([][]float64, len(fx.b.X)), T: make([]int8, n), Y: make([]float64, n), YValid: make([]bool, n)}
	s := &score.Scores{N: n, E: make([]float64, n), W: make([]float64, n), WValid: make([]bool, n), InSupport: make([]bool, n),
		Mu0: make([]float64, n), Mu1: make([]float64, n)}
	for j := range b.X {
		b.X[j] = make([]float64, n)
	}
	for k, i := range idx {
		for j := range b.X {
			b.X[j][k] = fx.b.X[j][i]
		}
		b.T[k], b.Y[k], b.YValid[k] = fx.b.T[i], fx.b.Y[i], fx.b.YValid[i]
		s.E[k], s.W[k], s.WValid[k], s.InSupport[k] = fx.s.E[i], fx.s.W[i], fx.s.WValid[i], fx.s.InSupport[i]
		s.Mu0[k], s.Mu1[k] = fx.s.Mu0[i], fx.s.Mu1[i]
	}
	return b, s
}

func span(lo, hi int) []int {
	idx := make([]int, hi-lo)
	for i := range idx {
		idx[i] = lo + i
	}
	return idx
}

// addInBatches feeds the fixture to a in consecutive batches of size k.
func (fx *effectsFixture) addInBatches(a *Effects, k int) {
	for lo := 0; lo < fx.b.N; lo += k {
		b, s := fx.rowsOf(span(lo, min(lo+k, fx.b.N)))
		a.Add(b, s)
	}
}

func relDiff(got, want float64) float64 {
	if got == want {
		return 0
	}
	return math.Abs(got-want) / math.Max(math.Abs(want), 1e-300)
}

var effectsScenarios = []string{"ate_plain", "att_clip_stab_cap", "overlap_trim", "atc_stab"}

// TestEffectsReference checks every estimate and both standard errors
// against testdata/ref/effects, written by
//
//	/usr/bin/python3 testdata/gen/effects_reference.py
//
// which computes them with numpy straight from the formulas (per-row
// influence functions; the delta-method gradient by central differences).
// Estimates and SE₁ must agree to relative 1e-9; SE₂ to 1e-6, the accuracy
// of the central differences (step 1e-5, error O(step²) in the gradient).
func TestEffectsReference(t *testing.T) {
	for _, name := range effectsScenarios {
		t.Run(name, func(t *testing.T) {
			fx := loadEffectsFixture(t, name)
			var ref refEstimates
			readJSON(t, filepath.Join("..", "testdata", "ref", "effects", name+".json"), &ref)
			a := NewEffects(fx.cfg)
			fx.addInBatches(a, 317)
			if a.Rows != ref.RowsUsed {
				t.Errorf("rows used %d, reference %d", a.Rows, ref.RowsUsed)
			}
			got := a.Estimates(&fx.model)
			for est, byEstimator := range ref.Estimates {
				for estimator, want := range byEstimator {
					g, ok := got[est][estimator]
					if !ok {
						t.Errorf("%s/%s missing", est, estimator)
						continue
					}
					for _, c := range []struct {
						what      string
						got, want float64
						tol       float64
					}{
						{"estimate", g.Estimate, want["estimate"], 1e-9},
						{"se", g.SE, want["se"], 1e-9},
						{"se_with_model_uncertainty", g.SEWithModelUncertainty, want["se_with_model_uncertainty"], 1e-6},
					} {
						if d := relDiff(c.got, c.want); !(d <= c.tol) {
							t.Errorf("%s/%s %s = %.15g, reference %.15g (relative %.2g > %g)", est, estimator, c.what, c.got, c.want, d, c.tol)
						}
					}
					if lo, hi := g.Estimate-z975*g.SE, g.Estimate+z975*g.SE; g.CILow != lo || g.CIHigh != hi {
						t.Errorf("%s/%s interval [%v, %v], want [%v, %v]", est, estimator, g.CILow, g.CIHigh, lo, hi)
					}
				}
				if len(got[est]) != len(byEstimator) {
					t.Errorf("%s: estimators %v, reference has %d", est, keys(got[est]), len(byEstimator))
				}
			}
		})
	}
}

func keys[V any](m map[string]V) []string {
	var k []string
	for s := range m {
		k = append(k, s)
	}
	sort.Strings(k)
	return k
}

// TestEffectsMergeExact splits the rows at random into parts, adds each
// (one through a JSON round trip of its state) and merges them in random
// order: every number must equal the single pass's to relative 1e-12.
func TestEffectsMergeExact(t *testing.T) {
	for _, name := range []string{"ate_plain", "att_clip_stab_cap"} {
		t.Run(name, func(t *testing.T) {
			fx := loadEffectsFixture(t, name)
			whole := NewEffects(fx.cfg)
			fx.addInBatches(whole, fx.b.N)
			want := whole.Estimates(&fx.model)

			rng := rand.New(rand.NewPCG(7, 11))
			for trial := 0; trial < 3; trial++ {
				parts := 2 + rng.IntN(6)
				idx := make([][]int, parts)
				for i := 0; i < fx.b.N; i++ {
					k := rng.IntN(parts)
					idx[k] = append(idx[k], i)
				}
				accs := make([]*Effects, parts)
				for k := range accs {
					accs[k] = NewEffects(fx.cfg)
					b, s := fx.rowsOf(idx[k])
					accs[k].Add(b, s)
				}
				raw, err := json.Marshal(accs[0])
				if err != nil {
					t.Fatal(err)
				}
				accs[0] = new(Effects)
				if err := json.Unmarshal(raw, accs[0]); err != nil {
					t.Fatal(err)
				}
				rng.Shuffle(parts, func(i, j int) { accs[i], accs[j] = accs[j], accs[i] })
				total := accs[0]
				for _, o := range accs[1:] {
					if err := total.Merge(o); err != nil {
						t.Fatal(err)
					}
				}
				if total.Rows != whole.Rows || total.Trimmed != whole.Trimmed || total.NullTreatment != whole.NullTreatment {
					t.Fatalf("counts differ: %+v vs %+v", total, whole)
				}
				got := total.Estimates(&fx.model)
				for est, m := range want {
					for estimator, w := range m {
						g := got[est][estimator]
						for _, c := range [][2]float64{{g.Estimate, w.Estimate}, {g.SE, w.SE}, {g.SEWithModelUncertainty, w.SEWithModelUncertainty}, {g.CILow, w.CILow}, {g.CIHigh, w.CIHigh}} {
							if d := relDiff(c[0], c[1]); !(d <= 1e-12) {
								t.Errorf("trial %d, %d parts: %s/%s %v vs single pass %v (relative %.2g)", trial, parts, est, estimator, c[0], c[1], d)
							}
						}
					}
				}
			}
		})
	}
}

// TestEffectsMergeRefusesOtherRuns: states of different runs do not merge.
func TestEffectsMergeRefusesOtherRuns(t *testing.T) {
	base := EffectsConfig{Policy: score.Policy{Estimand: score.ATE}, NTerms: 3}
	for _, c := range []struct {
		name string
		cfg  EffectsConfig
	}{
		{"terms", EffectsConfig{Policy: score.Policy{Estimand: score.ATE}, NTerms: 4}},
		{"estimand", EffectsConfig{Policy: score.Policy{Estimand: score.ATT}, NTerms: 3}},
		{"outcome", EffectsConfig{Policy: score.Policy{Estimand: score.ATE}, NTerms: 3, HasOutcome: true}},
	} {
		if err := NewEffects(base).Merge(NewEffects(c.cfg)); err == nil {
			t.Errorf("%s: merged", c.name)
		}
	}
}

// TestEffectsWrittenWeightPath: when the written weight is the plain
// score.Weight, the run's Hájek estimate (from s.W) equals the one computed
// from e, so the two weight paths agree with score.Weight.
func TestEffectsWrittenWeightPath(t *testing.T) {
	fx := loadEffectsFixture(t, "ate_plain")
	for _, est := range score.Estimands {
		for i := range fx.s.W {
			if fx.b.T[i] >= 0 {
				fx.s.W[i] = score.Weight(est, fx.b.T[i], fx.s.E[i])
			}
		}
		other := score.ATE
		if est == score.ATE {
			other = score.ATT
		}
		withW := NewEffects(EffectsConfig{Policy: score.Policy{Estimand: est}, NTerms: 4})
		fromE := NewEffects(EffectsConfig{Policy: score.Policy{Estimand: other}, NTerms: 4})
		withW.Add(&fx.b, &fx.s)
		fromE.Add(&fx.b, &fx.s)
		g, w := withW.Estimates(&fx.model)[est][EstimatorHajek], fromE.Estimates(&fx.model)[est][EstimatorHajek]
		for _, c := range [][2]float64{{g.Estimate, w.Estimate}, {g.SE, w.SE}, {g.SEWithModelUncertainty, w.SEWithModelUncertainty}} {
			if d := relDiff(c[0], c[1]); d > 1e-13 {
				t.Errorf("%s: written-weight path %v, formula path %v", est, c[0], c[1])
			}
		}
	}
}

// TestEffectsUndefined: estimators that are undefined are omitted, empty
// arms give NaN written as JSON null, missing covariances a NaN second SE,
// and contract violations flag rather than panic.
func TestEffectsUndefined(t *testing.T) {
	a := NewEffects(EffectsConfig{Policy: score.Policy{Estimand: score.ATE}, NTerms: 1})
	b := &fit.Batch{N: 2, X: [][]float64{}, T: []int8{1, -1}, Y: []float64{1, 2}, YValid: []bool{true, true}}
	s := &score.Scores{N: 2, E: []float64{0.5, 0.5}, W: []float64{2, 0}, InSupport: []bool{true, true}}
	a.Add(b, s)
	got := a.Estimates(nil)
	if _, ok := got[score.Overlap][EstimatorIPW]; ok {
		t.Error("ipw overlap reported")
	}
	if _, ok := got[score.ATE][EstimatorAIPW]; ok {
		t.Error("aipw reported without outcome models")
	}
	h := got[score.ATE][EstimatorHajek]
	if !math.IsNaN(h.Estimate) || !math.IsNaN(h.SEWithModelUncertainty) {
		t.Errorf("no control rows: %+v, want NaN", h)
	}
	raw, err := json.Marshal(got)
	if err != nil {
		t.Fatalf("marshal: %v", err)
	}
	var back map[string]map[string]Estimate
	if err := json.Unmarshal(raw, &back); err != nil {
		t.Fatal(err)
	}
	if !math.IsNaN(back[score.ATE][EstimatorHajek].Estimate) {
		t.Errorf("null did not read back as NaN: %s", raw)
	}
	if a.NullTreatment != 1 || a.Rows != 1 {
		t.Errorf("counts %+v", a)
	}

	// Outcome models promised but not delivered; terms that do not match.
	c := NewEffects(EffectsConfig{Policy: score.Policy{Estimand: score.ATE}, HasOutcome: true, NTerms: 3})
	c.Add(b, s)
	if !c.NoAugmented || !c.NoGradient {
		t.Errorf("flags %v %v, want both set", c.NoAugmented, c.NoGradient)
	}
	if e := c.Estimates(nil)[score.ATE][EstimatorAIPW]; !math.IsNaN(e.Estimate) {
		t.Errorf("aipw without predictions: %+v", e)
	}
}

// TestEffectsAddAllocs: Add allocates nothing once its scratch exists.
func TestEffectsAddAllocs(t *testing.T) {
	b, s := benchBatch(4096, 20)
	a := NewEffects(EffectsConfig{Policy: score.Policy{Estimand: score.ATE, Clip: 0.01}, HasOutcome: true, OutcomeKind: "continuous", NTerms: 21})
	a.Add(b, s)
	if n := testing.AllocsPerRun(5, func() { a.Add(b, s) }); n != 0 {
		t.Errorf("Add allocates %v times per call", n)
	}
}

// benchBatch is invented data of the benchmark's shape.
func benchBatch(n, p int) (*fit.Batch, *score.Scores) {
	rng := rand.New(rand.NewPCG(1, 2))
	b := &fit.Batch{N: n, X: make([][]float64, p), T: make([]int8, n), Y: make([]float64, n), YValid: make([]bool, n)}
	s := &score.Scores{N: n, E: make([]float64, n), W: make([]float64, n), WValid: make([]bool, n), InSupport: make([]bool, n),
		Mu0: make([]float64, n), Mu1: make([]float64, n)}
	for j := range b.X {
		b.X[j] = make([]float64, n)
		for i := range b.X[j] {
			b.X[j][i] = rng.NormFloat64()
		}
	}
	for i := 0; i < n; i++ {
		e := 1 / (1 + math.Exp(-0.5*b.X[0][i]))
		s.E[i] = e
		if rng.Float64() < e {
			b.T[i] = 1
		}
		b.Y[i] = b.X[1][i] + float64(b.T[i]) + rng.NormFloat64()
		b.YValid[i], s.WValid[i], s.InSupport[i] = true, true, true
		s.W[i] = score.Weight(score.ATE, b.T[i], e)
		s.Mu0[i], s.Mu1[i] = b.X[1][i], b.X[1][i]+1
	}
	return b, s
}

// BenchmarkEffectsAdd: 65536 rows, 20 terms besides the intercept, outcome
// models, gradients on.
func BenchmarkEffectsAdd(bm *testing.B) {
	const n = 65536
	b, s := benchBatch(n, 20)
	a := NewEffects(EffectsConfig{Policy: score.Policy{Estimand: score.ATE}, HasOutcome: true, OutcomeKind: "continuous", NTerms: 21})
	iters := 0
	cpu0 := cpuSeconds()
	for bm.Loop() {
		a.Add(b, s)
		iters++
	}
	bm.ReportMetric(float64(n)*float64(iters)/bm.Elapsed().Seconds(), "rows/s")
	bm.ReportMetric((cpuSeconds()-cpu0)*1e9/(float64(n)*float64(iters)), "cpu-ns/row")
}

// TestEffectsCorruptState: a state whose sums do not fit its configuration
// is refused by Merge and ignored by Add and Estimates, never a panic.
func TestEffectsCorruptState(t *testing.T) {
	cfg := EffectsConfig{Policy: score.Policy{Estimand: score.ATE}, NTerms: 2}
	var bad Effects
	if err := json.Unmarshal([]byte(`{"config":{"policy":{"estimand":"ate","stabilize":false},"n_terms":2},"layout":1,"sum":[{"s":1,"c":0}]}`), &bad); err != nil {
		t.Fatal(err)
	}
	if err := NewEffects(cfg).Merge(&bad); err == nil {
		t.Error("merged a corrupt state")
	}
	b := &fit.Batch{N: 1, X: [][]float64{{0.5}}, T: []int8{1}, Y: []float64{1}}
	s := &score.Scores{N: 1, E: []float64{0.5}, W: []float64{2}, InSupport: []bool{true}}
	bad.Add(b, s)
	if got := bad.Estimates(nil); len(got[score.ATE]) != 0 {
		t.Errorf("estimates from a corrupt state: %v", got)
	}
}

// TestEffectsAddWith: an own scratch that grew from small batches and a
// shared zero-value scratch give the same sums.
func TestEffectsAddWith(t *testing.T) {
	fx := loadEffectsFixture(t, "att_clip_stab_cap")
	grown := NewEffects(fx.cfg)
	for _, k := range []int{5, 17, 40, 300} { // batches of growing size
		for lo := 0; lo < fx.b.N; lo += k * 4 {
			b, s := fx.rowsOf(span(lo, min(lo+k, fx.b.N)))
			grown.Add(b, s)
		}
	}
	shared := NewEffects(fx.cfg)
	var sc EffectsScratch
	for _, k := range []int{5, 17, 40, 300} {
		for lo := 0; lo < fx.b.N; lo += k * 4 {
			b, s := fx.rowsOf(span(lo, min(lo+k, fx.b.N)))
			shared.AddWith(b, s, &sc)
		}
	}
	g, h := grown.Estimates(&fx.model), shared.Estimates(&fx.model)
	for est, m := range g {
		for k, v := range m {
			o := h[est][k]
			for _, c := range [][2]float64{{v.Estimate, o.Estimate}, {v.SE, o.SE}, {v.SEWithModelUncertainty, o.SEWithModelUncertainty}} {
				if d := relDiff(c[0], c[1]); d > 1e-12 {
					t.Errorf("%s/%s: own scratch %v, shared %v", est, k, c[0], c[1])
				}
			}
		}
	}
	if grown.own.rows != blockRows {
		t.Errorf("own scratch has %d rows after a 300-row batch, want %d", grown.own.rows, blockRows)
	}
	if grown.Rows == 0 || grown.Rows != shared.Rows {
		t.Fatalf("rows %d and %d", grown.Rows, shared.Rows)
	}
}
