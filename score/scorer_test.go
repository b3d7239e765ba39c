package score

import (
	"encoding/csv"
	"encoding/json"
	"errors"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"github.com/heft-project/heft/fit"
	"github.com/heft-project/heft/pipeline"
)

// reference is testdata/ref/score/basic.json, written by numpy and scipy:
//
//	/usr/bin/python3 testdata/gen/score_reference.py
type reference struct {
	Source          string                  `json:"source"`
	ShareTreated    float64                 `json:"share_treated"`
	LP              []float64               `json:"lp"`
	ERaw            []float64               `json:"e_raw"`
	Mu0Gaussian     []float64               `json:"mu0_gaussian"`
	Mu1Gaussian     []float64               `json:"mu1_gaussian"`
	Mu0Binomial     []float64               `json:"mu0_binomial"`
	Mu1Binomial     []float64               `json:"mu1_binomial"`
	WeightQuantiles map[string][][2]float64 `json:"weight_quantiles"`
	Cases           []struct {
		Estimand  string     `json:"estimand"`
		Stabilize bool       `json:"stabilize"`
		Clip      float64    `json:"clip"`
		Trim      float64    `json:"trim"`
		TruncateQ float64    `json:"truncate_quantile"`
		Cap       float64    `json:"cap"`
		Clipped   int64      `json:"clipped"`
		Trimmed   int64      `json:"trimmed"`
		Truncated int64      `json:"truncated"`
		E         []float64  `json:"e"`
		W         []*float64 `json:"w"`
		InSupport []bool     `json:"in_support"`
	} `json:"cases"`
}

type coefFile struct {
	Terms          []string  `json:"terms"`
	Propensity     []float64 `json:"propensity"`
	OutcomeTreated []float64 `json:"outcome_treated"`
	OutcomeControl []float64 `json:"outcome_control"`
}

func loadReference(t testing.TB) (*reference, *fit.Batch, coefFile) {
	t.Helper()
	root := filepath.Join("..", "testdata")
	var ref reference
	readJSON(t, filepath.Join(root, "ref", "score", "basic.json"), &ref)
	var cf coefFile
	readJSON(t, filepath.Join(root, "fixtures", "score", "basic_coef.json"), &cf)
	f, err := os.Open(filepath.Join(root, "fixtures", "score", "basic.csv"))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	rows, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	head, rows := rows[0], rows[1:]
	b := &fit.Batch{N: len(rows), X: make([][]float64, len(cf.Terms)-1), T: make([]int8, len(rows))}
	for j, term := range cf.Terms[1:] {
		if head[j] != term {
			t.Fatalf("fixture column %d is %q, coefficients say %q", j, head[j], term)
		}
		b.X[j] = make([]float64, len(rows))
		for i, r := range rows {
			if b.X[j][i], err = strconv.ParseFloat(r[j], 64); err != nil {
				t.Fatal(err)
			}
		}
	}
	for i, r := range rows {
		switch r[len(r)-1] {
		case "":
			b.T[i] = -1
		case "1":
			b.T[i] = 1
		case "0":
			b.T[i] = 0
		}
	}
	return &ref, b, cf
}

func readJSON(t testing.TB, path string, v any) {
	t.Helper()
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(data, v); err != nil {
		t.Fatalf("%s: %v", path, err)
	}
}

func refModel(ref *reference, cf coefFile, family string) *fit.Model {
	m := &fit.Model{
		Propensity: fit.GLM{Family: fit.FamilyBinomial, Terms: cf.Terms, Coef: cf.Propensity},
		Reference:  fit.Reference{ShareTreated: ref.ShareTreated, WeightQuantiles: map[string][]fit.Quantile{}},
	}
	if family != "" {
		m.Outcome = &fit.OutcomeModels{
			Treated: fit.GLM{Family: family, Terms: cf.Terms, Coef: cf.OutcomeTreated},
			Control: fit.GLM{Family: family, Terms: cf.Terms, Coef: cf.OutcomeControl},
		}
	}
	for k, qs := range ref.WeightQuantiles {
		for _, q := range qs {
			m.Reference.WeightQuantiles[k] = append(m.Reference.WeightQuantiles[k], fit.Quantile{Q: q[0], Value: q[1]})
		}
	}
	return m
}

// TestScoreReference compares every row of every case with numpy/scipy
// (testdata/gen/score_reference.py) to 1e-12, relative with a 1e-3 floor.
func TestScoreReference(t *testing.T) {
	ref, b, cf := loadReference(t)
	if len(ref.Cases) < 50 || b.N < 50 {
		t.Fatalf("reference has %d cases over %d rows; regenerate it", len(ref.Cases), b.N)
	}
	loc := pipeline.Location{File: "basic.csv", RowGroup: -1}
	for _, family := range []string{fit.FamilyGaussian, fit.FamilyBinomial} {
		m := refModel(ref, cf, family)
		for _, c := range ref.Cases {
			p := Policy{Estimand: c.Estimand, Stabilize: c.Stabilize, Clip: c.Clip, Trim: c.Trim, TruncateQ: c.TruncateQ}
			name := strings.Join([]string{c.Estimand, strconv.FormatBool(c.Stabilize), ftoa(c.Clip), ftoa(c.Trim), ftoa(c.TruncateQ), family}, "/")
			s, err := New(m, p)
			if err != nil {
				t.Fatalf("%s: %v", name, err)
			}
			if !near(s.Policy().Cap, c.Cap, 1e-12) {
				t.Errorf("%s: cap %v, numpy.interp %v", name, s.Policy().Cap, c.Cap)
			}
			var out Scores
			if err := s.Score(b, loc, &out); err != nil {
				t.Fatalf("%s: %v", name, err)
			}
			if out.Clipped != c.Clipped || out.Trimmed != c.Trimmed || out.Truncated != c.Truncated {
				t.Errorf("%s: counts clipped/trimmed/truncated %d/%d/%d, want %d/%d/%d", name,
					out.Clipped, out.Trimmed, out.Truncated, c.Clipped, c.Trimmed, c.Truncated)
			}
			for i := 0; i < b.N; i++ {
				if !near(out.E[i], c.E[i], 1e-12) {
					t.Errorf("%s row %d: e %v, want %v", name, i, out.E[i], c.E[i])
				}
				if out.InSupport[i] != c.InSupport[i] {
					t.Errorf("%s row %d: in_support %v, want %v", name, i, out.InSupport[i], c.InSupport[i])
				}
				switch {
				case c.W[i] == nil:
					if out.WValid[i] {
						t.Errorf("%s row %d: weight %v, want null", name, i, out.W[i])
					}
				case !out.WValid[i] || !near(out.W[i], *c.W[i], 1e-12):
					t.Errorf("%s row %d: weight %v (valid %v), want %v", name, i, out.W[i], out.WValid[i], *c.W[i])
				}
			}
			mu0, mu1 := ref.Mu0Gaussian, ref.Mu1Gaussian
			if family == fit.FamilyBinomial {
				mu0, mu1 = ref.Mu0Binomial, ref.Mu1Binomial
			}
			for i := 0; i < b.N; i++ {
				if !near(out.Mu0[i], mu0[i], 1e-12) || !near(out.Mu1[i], mu1[i], 1e-12) {
					t.Errorf("%s row %d: mu0, mu1 = %v, %v, want %v, %v", name, i, out.Mu0[i], out.Mu1[i], mu0[i], mu1[i])
				}
			}
		}
	}
}

func ftoa(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }

// oneTerm is a model with the intercept and one term of coefficient 1, so
// a row's linear predictor is its x.
func oneTerm(share float64) *fit.Model {
	return &fit.Model{
		Propensity: fit.GLM{Family: fit.FamilyBinomial, Terms: []string{"intercept", "x"}, Coef: []float64{0, 1}},
		Reference:  fit.Reference{ShareTreated: share},
	}
}

func batchOf(x []float64, tr []int8) *fit.Batch {
	return &fit.Batch{N: len(x), X: [][]float64{x}, T: tr}
}

// TestPolicyOrder checks clip, stabilize, truncate and trim row by row
// against the six steps written out independently here.
func TestPolicyOrder(t *testing.T) {
	lps := []float64{-6, -3, -2.5, -1, -0.2, 0, 0.3, 1.2, 2.9, 4, 7, -4}
	tr := []int8{1, 0, 1, 0, 1, 0, -1, 1, 0, 1, 0, -1}
	const share = 0.3
	for _, p := range []Policy{
		{Estimand: ATE},
		{Estimand: ATE, Clip: 0.05},
		{Estimand: ATT, Stabilize: true, Clip: 0.01, Trim: 0.1},
		{Estimand: ATC, Cap: 4},
		{Estimand: ATE, Stabilize: true, Cap: 2.5, Trim: 0.07},
		{Estimand: Overlap, Clip: 0.2, Trim: 0.2},
		{Estimand: Overlap, Trim: 0.3, Cap: 0.4},
	} {
		s, err := New(oneTerm(share), p)
		if err != nil {
			t.Fatal(err)
		}
		var out Scores
		if err := s.Score(batchOf(lps, tr), pipeline.Location{}, &out); err != nil {
			t.Fatalf("%+v: %v", p, err)
		}
		var clipped, trimmed, truncated int64
		for i, lp := range lps {
			e := 1 / (1 + math.Exp(-lp))
			if p.Clip > 0 && (e < p.Clip || e > 1-p.Clip) {
				e = math.Min(math.Max(e, p.Clip), 1-p.Clip)
				clipped++
			}
			T := float64(tr[i])
			var w float64
			switch p.Estimand {
			case ATE:
				w = T/e + (1-T)/(1-e)
			case ATT:
				w = T + (1-T)*e/(1-e)
			case ATC:
				w = T*(1-e)/e + (1 - T)
			case Overlap:
				w = T*(1-e) + (1-T)*e
			}
			if p.Stabilize {
				w *= T*share + (1-T)*(1-share)
			}
			in := p.Trim == 0 || (e >= p.Trim && e <= 1-p.Trim)
			if !in {
				trimmed++
				w = 0
			}
			if p.Cap > 0 && w > p.Cap && tr[i] >= 0 {
				w = p.Cap
				truncated++
			}
			if !near(out.E[i], e, 1e-12) || out.InSupport[i] != in {
				t.Errorf("%+v row %d: e %v in %v, want %v %v", p, i, out.E[i], out.InSupport[i], e, in)
			}
			if tr[i] < 0 {
				if out.WValid[i] {
					t.Errorf("%+v row %d: null treatment got a weight", p, i)
				}
				continue
			}
			if !out.WValid[i] || !near(out.W[i], w, 1e-12) {
				t.Errorf("%+v row %d: w %v, want %v", p, i, out.W[i], w)
			}
		}
		if out.Clipped != clipped || out.Trimmed != trimmed || out.Truncated != truncated {
			t.Errorf("%+v: counts %d/%d/%d, want %d/%d/%d", p, out.Clipped, out.Trimmed, out.Truncated, clipped, trimmed, truncated)
		}
	}
}

// TestExtremePropensity: e exactly 0 or 1 without --clip is a located error;
// with --clip it is bounded; a null-treatment row is exempt (no weight).
func TestExtremePropensity(t *testing.T) {
	loc := pipeline.Location{File: "part-3.parquet", RowGroup: 2, Row: 1000}
	for _, c := range []struct {
		x       []float64
		tr      []int8
		row     int64
		message string
	}{
		{[]float64{0, 1, 40, 50}, []int8{0, 1, 0, 1}, 1002, "exactly 1"},
		{[]float64{0, -800, 40}, []int8{0, 1, 0}, 1001, "exactly 0"},
	} {
		s, _ := New(oneTerm(0.5), Policy{Estimand: ATE})
		var out Scores
		err := s.Score(batchOf(c.x, c.tr), loc, &out)
		var pe *pipeline.Error
		if !errors.As(err, &pe) {
			t.Fatalf("got %v, want a *pipeline.Error", err)
		}
		if pe.File != loc.File || pe.RowGroup != 2 || pe.Row != c.row || !strings.Contains(err.Error(), c.message) || !strings.Contains(err.Error(), "--clip") {
			t.Errorf("error %q (row %d), want row %d saying %q and --clip", err, pe.Row, c.row, c.message)
		}
		s, _ = New(oneTerm(0.5), Policy{Estimand: ATE, Clip: 1e-6})
		if err := s.Score(batchOf(c.x, c.tr), loc, &out); err != nil {
			t.Fatal(err)
		}
		for i, w := range out.W {
			if math.IsInf(w, 0) || math.IsNaN(w) || w > 1e6+1e-6 {
				t.Errorf("clipped row %d: weight %v", i, w)
			}
		}
	}
	s, _ := New(oneTerm(0.5), Policy{Estimand: ATE})
	var out Scores
	if err := s.Score(batchOf([]float64{40, -800}, []int8{-1, -1}), loc, &out); err != nil {
		t.Errorf("null-treatment rows: %v", err)
	}
	// Trimming alone takes such rows out of support: weight 0, no error.
	s, _ = New(oneTerm(0.5), Policy{Estimand: ATE, Trim: 0.01})
	if err := s.Score(batchOf([]float64{40, -800, 0}, []int8{0, 1, 1}), loc, &out); err != nil {
		t.Fatalf("trimmed rows: %v", err)
	}
	if out.W[0] != 0 || out.W[1] != 0 || out.InSupport[0] || out.InSupport[1] || out.Trimmed != 2 || out.W[2] != 2 {
		t.Errorf("trimmed extreme rows: w %v in %v trimmed %d", out.W, out.InSupport, out.Trimmed)
	}
}

func TestNewErrors(t *testing.T) {
	m := oneTerm(0)
	for _, c := range []struct {
		m    *fit.Model
		p    Policy
		want string
	}{
		{m, Policy{Estimand: "ate", Stabilize: true}, "--stabilize"},
		{m, Policy{Estimand: "ate", TruncateQ: 0.99}, "--truncate-quantile"},
		{m, Policy{Estimand: "bogus"}, "--estimand"},
		{&fit.Model{Propensity: fit.GLM{Family: fit.FamilyGaussian, Coef: []float64{1}}}, Policy{Estimand: ATE}, "family"},
		{&fit.Model{Propensity: fit.GLM{Family: fit.FamilyBinomial, Coef: []float64{math.NaN()}}}, Policy{Estimand: ATE}, "NaN"},
		{&fit.Model{Propensity: fit.GLM{Family: fit.FamilyBinomial, Coef: []float64{0, 1}},
			Outcome: &fit.OutcomeModels{Treated: fit.GLM{Family: fit.FamilyGaussian, Coef: []float64{1}}, Control: fit.GLM{Family: fit.FamilyGaussian, Coef: []float64{1, 2}}}},
			Policy{Estimand: ATE}, "share terms"},
	} {
		if _, err := New(c.m, c.p); err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%+v: error %v, want one mentioning %q", c.p, err, c.want)
		}
	}
}

func TestScoreShapeErrors(t *testing.T) {
	s, _ := New(oneTerm(0.5), Policy{Estimand: ATE})
	var out Scores
	loc := pipeline.Location{File: "f.arrow", RowGroup: -1}
	for _, b := range []*fit.Batch{
		{N: 2, X: [][]float64{{1, 2}, {3, 4}}, T: []int8{0, 1}},
		{N: 2, X: [][]float64{{1}}, T: []int8{0, 1}},
		{N: 2, X: [][]float64{{1, 2}}, T: []int8{0}},
		{N: 2, X: [][]float64{{1, math.NaN()}}, T: []int8{0, 1}},
	} {
		var pe *pipeline.Error
		if err := s.Score(b, loc, &out); !errors.As(err, &pe) || pe.File != "f.arrow" {
			t.Errorf("batch %+v: error %v, want a *pipeline.Error naming the file", b, err)
		}
	}
}

// TestScoreReuse: a second, smaller batch reuses the buffers and leaves no
// state from the first.
func TestScoreReuse(t *testing.T) {
	s, _ := New(oneTerm(0.5), Policy{Estimand: ATE, Clip: 0.1})
	var out Scores
	if err := s.Score(batchOf([]float64{-5, 5, 0}, []int8{0, 1, 0}), pipeline.Location{}, &out); err != nil {
		t.Fatal(err)
	}
	if err := s.Score(batchOf([]float64{0}, []int8{1}), pipeline.Location{}, &out); err != nil {
		t.Fatal(err)
	}
	if out.N != 1 || len(out.E) != 1 || out.Clipped != 0 || out.W[0] != 2 {
		t.Errorf("second batch: %+v", out)
	}
}

func BenchmarkScore(b *testing.B) {
	const n, terms = 65536, 20
	m := &fit.Model{Propensity: fit.GLM{Family: fit.FamilyBinomial, Coef: make([]float64, terms+1)}, Reference: fit.Reference{ShareTreated: 0.4}}
	batch := &fit.Batch{N: n, X: make([][]float64, terms), T: make([]int8, n)}
	for j := range batch.X {
		m.Propensity.Coef[j+1] = 0.05 * float64(j%7-3)
		batch.X[j] = make([]float64, n)
		for i := range batch.X[j] {
			batch.X[j][i] = float64((i*(j+3))%101)/50 - 1
		}
	}
	for i := range batch.T {
		batch.T[i] = int8(i % 2)
	}
	s, err := New(m, Policy{Estimand: ATE, Stabilize: true, Clip: 0.01, Trim: 0.02})
	if err != nil {
		b.Fatal(err)
	}
	var out Scores
	b.ResetTimer()
	for b.Loop() {
		if err := s.Score(batch, pipeline.Location{}, &out); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(n)*float64(b.N)/b.Elapsed().Seconds(), "rows/s")
}

func TestNewTermsMismatch(t *testing.T) {
	m := &fit.Model{
		Encoding:   fit.Encoding{Treatment: fit.Treatment{Column: "t"}, Columns: []fit.ColumnSpec{{Name: "x", Kind: fit.KindNumeric}}},
		Propensity: fit.GLM{Family: fit.FamilyBinomial, Terms: []string{"intercept", "y"}, Coef: []float64{0, 1}},
	}
	if _, err := New(m, Policy{Estimand: ATE}); err == nil || !strings.Contains(err.Error(), "terms") {
		t.Errorf("error %v, want a terms mismatch", err)
	}
	m.Propensity.Terms[1] = "x"
	if _, err := New(m, Policy{Estimand: ATE}); err != nil {
		t.Error(err)
	}
}

// WithoutOutcome drops only the predictions: propensities and weights stay
// the same bits.
func TestWithoutOutcomeKeepsWeights(t *testing.T) {
	ref, b, cf := loadReference(t)
	full, err := New(refModel(ref, cf, fit.FamilyGaussian), Policy{Estimand: ATE, Clip: 0.01})
	if err != nil {
		t.Fatal(err)
	}
	bare := full.WithoutOutcome()
	if bare.HasOutcome() || !full.HasOutcome() {
		t.Fatal("WithoutOutcome must drop the outcome models of the copy only")
	}
	var a, c Scores
	if err := full.Score(b, pipeline.Location{File: "x"}, &a); err != nil {
		t.Fatal(err)
	}
	if err := bare.Score(b, pipeline.Location{File: "x"}, &c); err != nil {
		t.Fatal(err)
	}
	if c.Mu0 != nil || c.Mu1 != nil {
		t.Fatal("predictions computed without outcome models")
	}
	for i := range a.E {
		if a.E[i] != c.E[i] || a.W[i] != c.W[i] {
			t.Fatalf("row %d: %v/%v vs %v/%v", i, a.E[i], a.W[i], c.E[i], c.W[i])
		}
	}
}
