package aggregate

import (
	"encoding/csv"
	"encoding/json"
	"os"
	"strconv"
	"testing"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"
	"github.com/heft-project/heft/fit"
	"github.com/heft-project/heft/score"
)

// fixture is testdata/fixtures/aggregate/rows.csv in columns, written by
// testdata/gen/aggregate_reference.py.
type fixture struct {
	n        int
	x        [][]float64 // per term
	t        []int8
	y        []float64
	yValid   []bool
	e        []float64
	mu0, mu1 []float64
	region   []string // "" is null
	ref      fit.Reference
}

var fixtureTerms = []string{"x1", "x2", "x3", "cat=b", "cat=c"}

func loadFixture(t testing.TB) *fixture {
	t.Helper()
	f, err := os.Open("../testdata/fixtures/aggregate/rows.csv")
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	recs, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	head := map[string]int{}
	for i, h := range recs[0] {
		head[h] = i
	}
	fx := &fixture{x: make([][]float64, len(fixtureTerms))}
	num := func(s string) float64 {
		v, err := strconv.ParseFloat(s, 64)
		if err != nil {
			t.Fatal(err)
		}
		return v
	}
	for _, r := range recs[1:] {
		for j, name := range fixtureTerms {
			fx.x[j] = append(fx.x[j], num(r[head[name]]))
		}
		switch r[head["t"]] {
		case "":
			fx.t = append(fx.t, -1)
		case "1":
			fx.t = append(fx.t, 1)
		default:
			fx.t = append(fx.t, 0)
		}
		if s := r[head["y"]]; s == "" {
			fx.y, fx.yValid = append(fx.y, 0), append(fx.yValid, false)
		} else {
			fx.y, fx.yValid = append(fx.y, num(s)), append(fx.yValid, true)
		}
		fx.e = append(fx.e, num(r[head["e"]]))
		fx.mu0 = append(fx.mu0, num(r[head["mu0"]]))
		fx.mu1 = append(fx.mu1, num(r[head["mu1"]]))
		fx.region = append(fx.region, r[head["region"]])
	}
	fx.n = len(fx.t)
	data, err := os.ReadFile("../testdata/fixtures/aggregate/reference.json")
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(data, &fx.ref); err != nil {
		t.Fatal(err)
	}
	return fx
}

// model is a model with the fixture's reference; the coefficients are not
// used by the accumulators.
func (fx *fixture) model() *fit.Model {
	terms := append([]string{"intercept"}, fixtureTerms...)
	coef := make([]float64, len(terms))
	m := &fit.Model{
		Format: fit.FormatName, FormatVersion: fit.FormatVersion, Created: "2026-12-01T00:00:00Z",
		Encoding: fit.Encoding{Treatment: fit.Treatment{Column: "t", TreatedValue: "1", ControlValue: "0"},
			Outcome: &fit.Outcome{Column: "y", Kind: "continuous"}},
		Propensity: fit.GLM{Family: fit.FamilyBinomial, Terms: terms, Coef: coef, SE: coef},
		Outcome: &fit.OutcomeModels{Kind: "continuous",
			Treated: fit.GLM{Family: fit.FamilyGaussian, Terms: terms, Coef: coef},
			Control: fit.GLM{Family: fit.FamilyGaussian, Terms: terms, Coef: coef}},
		Reference: fx.ref,
	}
	sum, err := m.ComputeChecksum()
	if err != nil {
		panic(err)
	}
	m.Checksum = sum
	return m
}

// part is rows [lo, hi) as the score stage hands them to an accumulator.
type part struct {
	lo  int
	rec arrow.RecordBatch
	b   fit.Batch
	s   score.Scores
}

func (fx *fixture) part(t testing.TB, estimand string, lo, hi int) *part {
	t.Helper()
	n := hi - lo
	p := &part{lo: lo}
	// invented per-row counts, additive over any split: row i has an
	// unseen level when i%3 == 0, an imputed x2 when i%5 == 0, ...
	every := func(k int) int64 {
		var c int64
		for i := lo; i < hi; i++ {
			if i%k == 0 {
				c++
			}
		}
		return c
	}
	p.b = fit.Batch{N: n, X: make([][]float64, len(fx.x)), T: fx.t[lo:hi], Y: fx.y[lo:hi], YValid: fx.yValid[lo:hi],
		Unseen: map[string]int64{"cat": every(3)}, MissingImputed: map[string]int64{"x2": every(5)}}
	for j := range fx.x {
		p.b.X[j] = fx.x[j][lo:hi]
	}
	p.s = score.Scores{N: n, E: fx.e[lo:hi], W: make([]float64, n), WValid: make([]bool, n), InSupport: make([]bool, n),
		Mu0: fx.mu0[lo:hi], Mu1: fx.mu1[lo:hi], Clipped: every(2), Trimmed: every(7)}
	for i := 0; i < n; i++ {
		p.s.InSupport[i] = true
		if tt := fx.t[lo+i]; tt >= 0 {
			p.s.W[i] = score.Weight(estimand, tt, fx.e[lo+i])
			p.s.WValid[i] = true
		}
	}
	bld := array.NewStringBuilder(memory.DefaultAllocator)
	defer bld.Release()
	for _, r := range fx.region[lo:hi] {
		if r == "" {
			bld.AppendNull()
		} else {
			bld.Append(r)
		}
	}
	col := bld.NewArray()
	defer col.Release()
	p.rec = array.NewRecordBatch(fixtureSchema, []arrow.Array{col}, int64(n))
	t.Cleanup(p.rec.Release)
	return p
}

var fixtureSchema = arrow.NewSchema([]arrow.Field{{Name: "region", Type: arrow.BinaryTypes.String, Nullable: true}}, nil)

// parts cuts [0, n) at the given points.
func (fx *fixture) parts(t testing.TB, estimand string, cuts []int) []*part {
	var ps []*part
	lo := 0
	for _, c := range append(cuts, fx.n) {
		ps = append(ps, fx.part(t, estimand, lo, c))
		lo = c
	}
	return ps
}

func (fx *fixture) config(estimand string) Config {
	return Config{Model: fx.model(), Policy: score.Policy{Estimand: estimand}, By: []string{"region"}}
}

func feed(t testing.TB, s *State, ps []*part) {
	t.Helper()
	for _, p := range ps {
		if err := s.Add(p.rec, &p.b, &p.s); err != nil {
			t.Fatal(err)
		}
	}
}
