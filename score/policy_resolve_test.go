package score

import (
	"math"
	"strings"
	"testing"

	"github.com/heft-project/heft/fit"
	"github.com/heft-project/heft/pipeline"
)

func TestQuantileGrid(t *testing.T) {
	g := QuantileGrid()
	if len(g) != 204 || g[0] != 0 || g[len(g)-1] != 1 || g[1] != 0.005 {
		t.Fatalf("grid has %d points from %v to %v", len(g), g[0], g[len(g)-1])
	}
	for i := 1; i < len(g); i++ {
		if !(g[i] > g[i-1]) {
			t.Fatalf("grid not increasing at %d: %v, %v", i, g[i-1], g[i])
		}
	}
	for _, q := range []float64{0.995, 0.999, 0.9995, 0.9999} {
		found := false
		for _, v := range g {
			found = found || v == q
		}
		if !found {
			t.Errorf("grid lacks %v", q)
		}
	}
}

// TestWeightQuantilesReference compares with numpy.quantile (method
// "linear") in testdata/gen/score_reference.py, every key and grid point.
func TestWeightQuantilesReference(t *testing.T) {
	ref, b, cf := loadReference(t)
	m := refModel(ref, cf, "")
	s, err := New(m, Policy{Estimand: ATE})
	if err != nil {
		t.Fatal(err)
	}
	var out Scores
	if err := s.Score(b, pipeline.Location{File: "basic.csv", RowGroup: -1}, &out); err != nil {
		t.Fatal(err)
	}
	got := WeightQuantiles(out.E, b.T, ref.ShareTreated)
	if len(got) != 8 || len(ref.WeightQuantiles) != 8 {
		t.Fatalf("%d keys, reference %d, want 8", len(got), len(ref.WeightQuantiles))
	}
	for key, want := range ref.WeightQuantiles {
		g := got[key]
		if len(g) != len(want) {
			t.Fatalf("%s: %d quantiles, want %d", key, len(g), len(want))
		}
		for i, w := range want {
			if g[i].Q != w[0] || !near(g[i].Value, w[1], 1e-12) {
				t.Errorf("%s q=%v: %v, numpy %v", key, w[0], g[i].Value, w[1])
			}
		}
	}
}

func TestWeightQuantilesSkips(t *testing.T) {
	e := []float64{0.5, 0, 1, 0.25, 0.75}
	tr := []int8{1, 1, 0, -1, 0}
	got := WeightQuantiles(e, tr, 0.5)
	// ATE keeps rows 0 and 4 (weights 2 and 4): the others are infinite or untreated.
	ate := got[ATE]
	if ate[0].Value != 2 || ate[len(ate)-1].Value != 4 {
		t.Errorf("ate range %v..%v, want 2..4", ate[0].Value, ate[len(ate)-1].Value)
	}
	if s := got[StabilizedKey(ATE)]; s[len(s)-1].Value != 2 {
		t.Errorf("stabilized max %v, want 2", s[len(s)-1].Value)
	}
	if len(WeightQuantiles(nil, nil, 0.5)) != 0 {
		t.Error("no rows should give no keys")
	}
}

func TestResolve(t *testing.T) {
	qs := []fit.Quantile{{Q: 0, Value: 1}, {Q: 0.5, Value: 2}, {Q: 0.9, Value: 6}, {Q: 1, Value: 26}}
	m := &fit.Model{Reference: fit.Reference{WeightQuantiles: map[string][]fit.Quantile{
		ATE: qs, StabilizedKey(ATE): {{Q: 0, Value: 0.5}, {Q: 1, Value: 3}},
	}}}
	for _, c := range []struct {
		p    Policy
		want float64
	}{
		{Policy{Estimand: ATE, TruncateQ: 0.5}, 2},
		{Policy{Estimand: ATE, TruncateQ: 0.7}, 4},   // halfway from 2 to 6
		{Policy{Estimand: ATE, TruncateQ: 0.95}, 16}, // halfway from 6 to 26
		{Policy{Estimand: ATE, TruncateQ: 1}, 26},
		{Policy{Estimand: ATE, Stabilize: true, TruncateQ: 0.2}, 1},
		{Policy{Estimand: ATE}, 0},
	} {
		r, err := c.p.Resolve(m)
		if err != nil {
			t.Errorf("%+v: %v", c.p, err)
			continue
		}
		if math.Abs(r.Cap-c.want) > 1e-12 {
			t.Errorf("%+v: cap %v, want %v", c.p, r.Cap, c.want)
		}
	}
	for _, c := range []struct {
		m    *fit.Model
		p    Policy
		want string
	}{
		{m, Policy{Estimand: ATT, TruncateQ: 0.9}, `"att"`},
		{m, Policy{Estimand: ATE, TruncateQ: 2}, "--truncate-quantile"},
		{&fit.Model{Reference: fit.Reference{WeightQuantiles: map[string][]fit.Quantile{ATE: {{Q: 0.5, Value: 1}, {Q: 0.6, Value: 2}}}}}, Policy{Estimand: ATE, TruncateQ: 0.9}, "outside"},
		{&fit.Model{Reference: fit.Reference{WeightQuantiles: map[string][]fit.Quantile{ATE: {{Q: 0.5, Value: 1}, {Q: 0.5, Value: 2}}}}}, Policy{Estimand: ATE, TruncateQ: 0.5}, "increasing"},
	} {
		if _, err := c.p.Resolve(c.m); err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%+v: error %v, want one mentioning %s", c.p, err, c.want)
		}
	}
}
