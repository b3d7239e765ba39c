package aggregate

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"github.com/heft-project/heft/pipeline"
	"github.com/heft-project/heft/score"
)

// compareJSON walks two decoded JSON values and reports every difference:
// numbers must agree to relative rel (absolute rel near zero), everything
// else exactly.
func compareJSON(path string, a, b any, rel float64, diffs *[]string) {
	switch x := a.(type) {
	case map[string]any:
		y, ok := b.(map[string]any)
		if !ok || len(x) != len(y) {
			*diffs = append(*diffs, fmt.Sprintf("%s: %v vs %v", path, a, b))
			return
		}
		for k, v := range x {
			compareJSON(path+"."+k, v, y[k], rel, diffs)
		}
	case []any:
		y, ok := b.([]any)
		if !ok || len(x) != len(y) {
			*diffs = append(*diffs, fmt.Sprintf("%s: %v vs %v", path, a, b))
			return
		}
		for i := range x {
			compareJSON(fmt.Sprintf("%s[%d]", path, i), x[i], y[i], rel, diffs)
		}
	case float64:
		y, ok := b.(float64)
		if !ok || math.Abs(x-y) > rel*math.Max(math.Max(math.Abs(x), math.Abs(y)), 1) {
			*diffs = append(*diffs, fmt.Sprintf("%s: %v vs %v", path, a, b))
		}
	default:
		if a != b {
			*diffs = append(*diffs, fmt.Sprintf("%s: %v vs %v", path, a, b))
		}
	}
}

func reportJSON(t *testing.T, s *State) any {
	t.Helper()
	var buf bytes.Buffer
	if err := s.Report().WriteJSON(&buf); err != nil {
		t.Fatal(err)
	}
	var v any
	if err := json.Unmarshal(buf.Bytes(), &v); err != nil {
		t.Fatal(err)
	}
	return v
}

func sameReport(t *testing.T, what string, a, b *State, rel float64) {
	t.Helper()
	var diffs []string
	compareJSON("report", reportJSON(t, a), reportJSON(t, b), rel, &diffs)
	for i, d := range diffs {
		if i == 10 {
			t.Errorf("%s: … %d differences in all", what, len(diffs))
			break
		}
		t.Errorf("%s: %s", what, d)
	}
}

// TestMergeAnySplit is the mergeability property: the input cut into k
// random parts at random points, each part accumulated alone, the parts
// merged in random order (some through their JSON), gives every report
// figure of the single pass to relative 1e-12.
func TestMergeAnySplit(t *testing.T) {
	fx := loadFixture(t)
	rng := rand.New(rand.NewPCG(7, 11))
	for trial := 0; trial < 8; trial++ {
		estimand := score.Estimands[trial%len(score.Estimands)]
		cfg := fx.config(estimand)
		cfg.Gate = Gate{MaxSMD: 0.05, MinESSShare: 0.5, MaxPSI: 0.01}
		whole, err := New(cfg, fixtureSchema)
		if err != nil {
			t.Fatal(err)
		}
		feed(t, whole, []*part{fx.part(t, estimand, 0, fx.n)})

		k := 2 + rng.IntN(12)
		cutSet := map[int]bool{}
		for len(cutSet) < k-1 {
			cutSet[1+rng.IntN(fx.n-1)] = true
		}
		var cuts []int
		for c := range cutSet {
			cuts = append(cuts, c)
		}
		slices.Sort(cuts)
		var states []*State
		for _, p := range fx.parts(t, estimand, cuts) {
			s := whole.Empty()
			// some parts in more than one batch
			if p.b.N > 10 && rng.IntN(2) == 0 {
				m := 1 + rng.IntN(p.b.N-1)
				lo := p.lo
				feed(t, s, []*part{fx.part(t, estimand, lo, lo+m), fx.part(t, estimand, lo+m, lo+p.b.N)})
			} else {
				feed(t, s, []*part{p})
			}
			if rng.IntN(3) == 0 {
				s = roundTrip(t, s)
			}
			states = append(states, s)
		}
		rng.Shuffle(len(states), func(i, j int) { states[i], states[j] = states[j], states[i] })
		total := states[0]
		for _, s := range states[1:] {
			if err := total.Merge(s); err != nil {
				t.Fatal(err)
			}
		}
		sameReport(t, fmt.Sprintf("trial %d (%s, %d parts)", trial, estimand, k), whole, total, 1e-12)
	}
}

func roundTrip(t *testing.T, s *State) *State {
	t.Helper()
	data, err := s.MarshalJSON()
	if err != nil {
		t.Fatal(err)
	}
	r, err := UnmarshalState("state.json", data)
	if err != nil {
		t.Fatal(err)
	}
	again, err := r.MarshalJSON()
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(data, again) {
		t.Fatalf("state JSON changed on a round trip")
	}
	return r
}

// TestStateFile writes a state, reads it back and checks the JSON and the
// report are unchanged, and that merging with an empty state is the
// identity on either side.
func TestStateFile(t *testing.T) {
	fx := loadFixture(t)
	s, err := New(fx.config(score.ATT), fixtureSchema)
	if err != nil {
		t.Fatal(err)
	}
	s.Inputs = []string{"a.parquet"}
	s.RunSeconds = 1.5
	feed(t, s, fx.parts(t, score.ATT, []int{1000, 2500}))
	path := filepath.Join(t.TempDir(), "run.state.json")
	if err := s.WriteFile(path); err != nil {
		t.Fatal(err)
	}
	r, err := ReadState(path)
	if err != nil {
		t.Fatal(err)
	}
	want, _ := s.MarshalJSON()
	got, _ := r.MarshalJSON()
	if !bytes.Equal(want, got) {
		t.Fatal("state read back differs")
	}
	sameReport(t, "read back", s, r, 0)
	var h map[string]any
	if err := json.Unmarshal(want, &h); err != nil {
		t.Fatal(err)
	}
	if h["format"] != StateFormat || h["format_version"] != float64(StateVersion) || h["model_checksum"] != fx.model().Checksum {
		t.Errorf("header %v %v %v", h["format"], h["format_version"], h["model_checksum"])
	}

	e := s.Empty()
	if err := r.Merge(e); err != nil {
		t.Fatal(err)
	}
	if got, _ := r.MarshalJSON(); !bytes.Equal(want, got) {
		t.Error("merging an empty state changed the state")
	}
	e = s.Empty()
	if err := e.Merge(s); err != nil {
		t.Fatal(err)
	}
	if got, _ := e.MarshalJSON(); !bytes.Equal(want, got) {
		t.Error("merging into an empty state did not give the state")
	}
	entries, _ := os.ReadDir(filepath.Dir(path))
	if len(entries) != 1 {
		t.Errorf("WriteFile left %d files, want 1", len(entries))
	}
}

func TestReadStateErrors(t *testing.T) {
	fx := loadFixture(t)
	s, _ := New(fx.config(score.ATE), fixtureSchema)
	good, _ := s.MarshalJSON()
	var h map[string]any
	json.Unmarshal(good, &h)
	edit := func(f func(map[string]any)) []byte {
		var c map[string]any
		json.Unmarshal(good, &c)
		f(c)
		b, _ := json.Marshal(c)
		return b
	}
	for _, c := range []struct {
		name, want string
		data       []byte
	}{
		{"not json", "not a heft state file", []byte("{")},
		{"format", `format is "heft-model"`, edit(func(c map[string]any) { c["format"] = "heft-model" })},
		{"version", "format_version 2", edit(func(c map[string]any) { c["format_version"] = 2 })},
		{"checksum", "does not match", edit(func(c map[string]any) { c["model_checksum"] = "sha256:other" })},
		{"edited model", "embedded model was edited", edit(func(c map[string]any) {
			c["model"].(map[string]any)["propensity"].(map[string]any)["coef"].([]any)[1] = 0.25
		})},
		{"shape", "terms", edit(func(c map[string]any) {
			c["state"].(map[string]any)["whole"].(map[string]any)["balance"].(map[string]any)["unweighted"] = []any{[]any{}, []any{}}
		})},
	} {
		_, err := UnmarshalState("x.state", c.data)
		if err == nil || !strings.Contains(err.Error(), c.want) || !strings.HasPrefix(err.Error(), "x.state") {
			t.Errorf("%s: error %v, want one naming the file and containing %q", c.name, err, c.want)
		}
	}
}

func TestMergeRefuses(t *testing.T) {
	fx := loadFixture(t)
	base := fx.config(score.ATE)
	a, err := New(base, fixtureSchema)
	if err != nil {
		t.Fatal(err)
	}
	other := fx.model()
	other.Checksum = "sha256:other"
	for _, c := range []struct {
		name, want string
		cfg        func(Config) Config
	}{
		{"model", "different models", func(c Config) Config { c.Model = other; return c }},
		{"policy", "different weighting policies", func(c Config) Config { c.Policy.Estimand = score.ATT; return c }},
		{"clip", "different weighting policies", func(c Config) Config { c.Policy.Clip = 0.01; return c }},
		{"by", "segmented by different columns", func(c Config) Config { c.By = nil; return c }},
		{"settings", "different settings", func(c Config) Config { c.MinSegmentRows = 5; return c }},
		{"gate", "different settings", func(c Config) Config { c.Gate.MaxPSI = 0.2; return c }},
	} {
		b, err := New(c.cfg(base), fixtureSchema)
		if err != nil {
			t.Fatal(err)
		}
		if err := a.Merge(b); err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: %v, want an error containing %q", c.name, err, c.want)
		}
	}
}

func TestNewErrors(t *testing.T) {
	fx := loadFixture(t)
	for _, c := range []struct {
		name, want string
		cfg        func(Config) Config
	}{
		{"no model", "no model", func(c Config) Config { c.Model = nil; return c }},
		{"missing by", `--by column "zone" is not in the input`, func(c Config) Config { c.By = []string{"zone"}; return c }},
		{"twice", `names column "region" twice`, func(c Config) Config { c.By = []string{"region", "region"}; return c }},
		{"gate", "--max-smd", func(c Config) Config { c.Gate.MaxSMD = -1; return c }},
		{"ess share", "at most 1", func(c Config) Config { c.Gate.MinESSShare = 2; return c }},
		{"estimand", "", func(c Config) Config { c.Policy.Estimand = "ace"; return c }},
		{"reference", "reference has", func(c Config) Config {
			m := *c.Model
			m.Reference.Terms = m.Reference.Terms[:2]
			c.Model = &m
			return c
		}},
	} {
		_, err := New(c.cfg(fx.config(score.ATE)), fixtureSchema)
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: %v, want an error containing %q", c.name, err, c.want)
		}
	}
}

func TestMaxSegments(t *testing.T) {
	fx := loadFixture(t)
	cfg := fx.config(score.ATE)
	cfg.MaxSegments = 3
	s, err := New(cfg, fixtureSchema)
	if err != nil {
		t.Fatal(err)
	}
	p := fx.part(t, score.ATE, 0, fx.n)
	err = s.Add(p.rec, &p.b, &p.s)
	if err == nil || !strings.Contains(err.Error(), `--by "region"`) || !strings.Contains(err.Error(), "more than 3") {
		t.Fatalf("got %v, want an error naming the column and the limit", err)
	}
	// the limit holds across a merge too: one state holds the null
	// region, the other three named regions
	a, _ := New(cfg, fixtureSchema)
	b, _ := New(cfg, fixtureSchema)
	i0 := slices.Index(fx.region, "")
	feed(t, a, []*part{fx.part(t, score.ATE, i0, i0+1)})
	j := 0
	for slices.Contains(fx.region[j:j+60], "") {
		j += 60
	}
	feed(t, b, []*part{fx.part(t, score.ATE, j, j+60)})
	if len(a.a.seg) != 1 || len(b.a.seg) != 3 {
		t.Fatalf("fixture has %d and %d segments, want 1 and 3", len(a.a.seg), len(b.a.seg))
	}
	if err := a.Merge(b); err == nil || !strings.Contains(err.Error(), "more than 3") {
		t.Errorf("merge: %v, want the segment limit", err)
	}
}

func TestAddErrors(t *testing.T) {
	fx := loadFixture(t)
	s, _ := New(fx.config(score.ATE), fixtureSchema)
	p := fx.part(t, score.ATE, 0, 50)
	x := slices.Clone(p.b.X[1])
	x[7] = math.Inf(1)
	p.b.X[1] = x
	err := s.Add(p.rec, &p.b, &p.s)
	var pe *pipeline.Error
	if !errors.As(err, &pe) || pe.Column != "x2" || !strings.Contains(err.Error(), "batch row 7") {
		t.Errorf("infinite term: %v, want a located error naming x2 and row 7", err)
	}
	p = fx.part(t, score.ATE, 0, 50)
	p.s.N = 49
	if err := s.Add(p.rec, &p.b, &p.s); err == nil {
		t.Error("mismatched scores accepted")
	}
	p = fx.part(t, score.ATE, 0, 50)
	tt := slices.Clone(p.b.T)
	tt[3] = 2
	p.b.T = tt
	if err := s.Add(p.rec, &p.b, &p.s); err == nil || !strings.Contains(err.Error(), `column "t"`) {
		t.Errorf("bad treatment code: %v", err)
	}
	p = fx.part(t, score.ATE, 0, 50)
	if err := s.Add(nil, &p.b, &p.s); err == nil || !strings.Contains(err.Error(), "--by") {
		t.Errorf("no record batch with --by: %v", err)
	}
}

// TestNullTreatmentLeftOut checks that rows with a null treatment change
// only the counts.
func TestNullTreatmentLeftOut(t *testing.T) {
	fx := loadFixture(t)
	cfg := fx.config(score.ATE)
	cfg.By = nil
	b, _ := New(cfg, nil)
	q := fx.part(t, score.ATE, 0, 200)
	tt := slices.Clone(q.b.T)
	for i := range tt {
		if i%2 == 0 {
			tt[i] = -1
			q.s.WValid[i], q.s.W[i] = false, 0
		}
	}
	q.b.T = tt
	feed(t, b, []*part{q, fx.part(t, score.ATE, 0, 0)})
	rb := b.Report()
	if rb.Rows != 200 || rb.NullTreatment < 100 || rb.Treated+rb.Control+rb.NullTreatment != 200 {
		t.Errorf("rows %d, null treatment %d, arms %d+%d", rb.Rows, rb.NullTreatment, rb.Treated, rb.Control)
	}
}

// TestHugeWeight checks that a weight whose square overflows is left out
// and counted, so the state still writes.
func TestHugeWeight(t *testing.T) {
	fx := loadFixture(t)
	s, _ := New(fx.config(score.ATE), fixtureSchema)
	p := fx.part(t, score.ATE, 0, 100)
	i := slices.Index(p.b.T, 1)
	p.s.W[i] = 1e300
	feed(t, s, []*part{p})
	r := s.Report()
	if r.Overlap.WithoutWeight != 1 || math.IsNaN(float64(r.ESS.Treated)) {
		t.Errorf("rows without weight %d, ESS %v", r.Overlap.WithoutWeight, r.ESS.Treated)
	}
	roundTrip(t, s) // writes, reads back and writes the same bytes
}
