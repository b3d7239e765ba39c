package aggregate

import (
	"encoding/json"
	"math"
	"os"
	"testing"

	"github.com/heft-project/heft/score"
)

// refArm, refTerm and refValues mirror testdata/ref/aggregate/balance.json,
// written by /usr/bin/python3 testdata/gen/aggregate_reference.py (numpy,
// statsmodels DescrStatsW).
type refArm struct {
	N     int64   `json:"n"`
	SumW  float64 `json:"sum_w"`
	SumW2 float64 `json:"sum_w2"`
	ESS   float64 `json:"ess"`
}

type refTerm struct {
	Term                  string  `json:"term"`
	MeanTreated           float64 `json:"mean_treated"`
	MeanControl           float64 `json:"mean_control"`
	VarTreated            float64 `json:"var_treated"`
	VarControl            float64 `json:"var_control"`
	MeanTreatedWeighted   float64 `json:"mean_treated_weighted"`
	MeanControlWeighted   float64 `json:"mean_control_weighted"`
	VarTreatedWeighted    float64 `json:"var_treated_weighted"`
	VarControlWeighted    float64 `json:"var_control_weighted"`
	SMDUnweighted         float64 `json:"smd_unweighted"`
	SMDWeighted           float64 `json:"smd_weighted"`
	VarianceRatioWeighted float64 `json:"variance_ratio_weighted"`
	KSWeighted            float64 `json:"ks_weighted"`
}

type refSegment struct {
	Rows      int64   `json:"rows"`
	Treated   refArm  `json:"treated"`
	Control   refArm  `json:"control"`
	MaxAbsSMD float64 `json:"max_abs_smd_weighted"`
}

type refEstimand struct {
	Arms struct {
		Treated refArm `json:"treated"`
		Control refArm `json:"control"`
	} `json:"arms"`
	Balance            []refTerm `json:"balance"`
	PropensityWeighted struct {
		Treated []float64 `json:"treated"`
		Control []float64 `json:"control"`
	} `json:"propensity_weighted"`
	LargestWeights map[string]struct {
		Weights []float64 `json:"weights"`
		Share   float64   `json:"share"`
	} `json:"largest_weights"`
	Segments map[string]refSegment `json:"segments"`
}

type refValues struct {
	Rows             int64     `json:"rows"`
	NullTreatment    int64     `json:"null_treatment"`
	PSI              float64   `json:"psi"`
	DecileCounts     []int64   `json:"decile_counts"`
	ShiftSD          []float64 `json:"shift_sd"`
	Below            ArmCounts `json:"e_below_0_01"`
	Above            ArmCounts `json:"e_above_0_99"`
	PropensityCounts struct {
		Treated []int64 `json:"treated"`
		Control []int64 `json:"control"`
	} `json:"propensity_counts"`
	Estimands map[string]refEstimand `json:"estimands"`
}

func loadRef(t *testing.T) *refValues {
	data, err := os.ReadFile("../testdata/ref/aggregate/balance.json")
	if err != nil {
		t.Fatal(err)
	}
	var r refValues
	if err := json.Unmarshal(data, &r); err != nil {
		t.Fatal(err)
	}
	return &r
}

func near(t *testing.T, what string, got Float, want, rel float64) {
	t.Helper()
	g := float64(got)
	if !(math.Abs(g-want) <= rel*math.Max(math.Abs(want), 1e-300)) {
		t.Errorf("%s = %.17g, want %.17g (rel. diff %.3g)", what, g, want, math.Abs(g-want)/math.Abs(want))
	}
}

// TestBalanceAgainstReference checks the whole run's figures and the
// segments' against numpy/statsmodels at relative 1e-9, the rows fed in
// batches of 777 so that the batch moments are merged many times.
func TestBalanceAgainstReference(t *testing.T) {
	fx := loadFixture(t)
	ref := loadRef(t)
	const rel = 1e-9
	for _, estimand := range score.Estimands {
		t.Run(estimand, func(t *testing.T) {
			want := ref.Estimands[estimand]
			s, err := New(fx.config(estimand), fixtureSchema)
			if err != nil {
				t.Fatal(err)
			}
			var cuts []int
			for c := 777; c < fx.n; c += 777 {
				cuts = append(cuts, c)
			}
			feed(t, s, fx.parts(t, estimand, cuts))
			r := s.Report()
			if r.Rows != ref.Rows || r.NullTreatment != ref.NullTreatment || r.Treated != want.Arms.Treated.N || r.Control != want.Arms.Control.N {
				t.Errorf("rows %d/%d/%d/%d, want %d/%d/%d/%d", r.Rows, r.NullTreatment, r.Treated, r.Control,
					ref.Rows, ref.NullTreatment, want.Arms.Treated.N, want.Arms.Control.N)
			}
			near(t, "ess treated", r.ESS.Treated, want.Arms.Treated.ESS, rel)
			near(t, "ess control", r.ESS.Control, want.Arms.Control.ESS, rel)
			near(t, "sum_w treated", r.SumWeights.Treated, want.Arms.Treated.SumW, rel)
			near(t, "sum_w control", r.SumWeights.Control, want.Arms.Control.SumW, rel)
			if len(r.Balance) != len(want.Balance) {
				t.Fatalf("%d balance rows, want %d", len(r.Balance), len(want.Balance))
			}
			for j, w := range want.Balance {
				g := r.Balance[j]
				if g.Term != w.Term {
					t.Errorf("term %d is %q, want %q", j, g.Term, w.Term)
				}
				for _, c := range []struct {
					name string
					got  Float
					want float64
				}{
					{"mean_treated", g.MeanTreated, w.MeanTreated}, {"mean_control", g.MeanControl, w.MeanControl},
					{"var_treated", g.VarTreated, w.VarTreated}, {"var_control", g.VarControl, w.VarControl},
					{"mean_treated_weighted", g.MeanTreatedWeighted, w.MeanTreatedWeighted},
					{"mean_control_weighted", g.MeanControlWeighted, w.MeanControlWeighted},
					{"var_treated_weighted", g.VarTreatedWeighted, w.VarTreatedWeighted},
					{"var_control_weighted", g.VarControlWeighted, w.VarControlWeighted},
					{"smd_unweighted", g.SMDUnweighted, w.SMDUnweighted}, {"smd_weighted", g.SMDWeighted, w.SMDWeighted},
					{"variance_ratio_weighted", g.VarianceRatioWeighted, w.VarianceRatioWeighted}, {"ks_weighted", g.KSWeighted, w.KSWeighted},
				} {
					near(t, w.Term+" "+c.name, c.got, c.want, rel)
				}
			}
			o := r.Overlap
			if !equalInts(o.Counts.Treated, ref.PropensityCounts.Treated) || !equalInts(o.Counts.Control, ref.PropensityCounts.Control) {
				t.Errorf("propensity counts %v / %v, want %v / %v", o.Counts.Treated, o.Counts.Control, ref.PropensityCounts.Treated, ref.PropensityCounts.Control)
			}
			for k := range want.PropensityWeighted.Treated {
				if w := want.PropensityWeighted.Treated[k]; w != 0 || o.Weighted.Treated[k] != 0 {
					near(t, "weighted propensity bin treated", o.Weighted.Treated[k], w, rel)
				}
				if w := want.PropensityWeighted.Control[k]; w != 0 || o.Weighted.Control[k] != 0 {
					near(t, "weighted propensity bin control", o.Weighted.Control[k], w, rel)
				}
			}
			if o.BelowLow != ref.Below || o.AboveHigh != ref.Above {
				t.Errorf("e < 0.01: %v, e > 0.99: %v; want %v, %v", o.BelowLow, o.AboveHigh, ref.Below, ref.Above)
			}
			for arm, list := range map[string][]WeightShare{"treated": o.LargestWeights.Treated, "control": o.LargestWeights.Control} {
				w := want.LargestWeights[arm]
				if len(list) != len(w.Weights) {
					t.Fatalf("%s: %d largest weights, want %d", arm, len(list), len(w.Weights))
				}
				for k := range list {
					near(t, arm+" largest weight", list[k].Weight, w.Weights[k], rel)
				}
			}
			near(t, "largest weights share treated", o.LargestWeightsShare.Treated, want.LargestWeights["treated"].Share, rel)
			near(t, "largest weights share control", o.LargestWeightsShare.Control, want.LargestWeights["control"].Share, rel)
			near(t, "psi", r.Drift.PSI, ref.PSI, rel)
			if !equalInts(r.Drift.DecileCounts, ref.DecileCounts) {
				t.Errorf("decile counts %v, want %v", r.Drift.DecileCounts, ref.DecileCounts)
			}
			for j, w := range ref.ShiftSD {
				near(t, r.Drift.Terms[j].Term+" shift_sd", r.Drift.Terms[j].ShiftSD, w, rel)
			}
			if len(r.Segments) != len(want.Segments) {
				t.Fatalf("%d segments, want %d", len(r.Segments), len(want.Segments))
			}
			for i, g := range r.Segments {
				key := g.By["region"]
				w, ok := want.Segments[key]
				if !ok {
					t.Fatalf("segment %q not in the reference", key)
				}
				if i > 0 && !(r.Segments[i-1].By["region"] < key) && r.Segments[i-1].By["region"] != NullValue {
					t.Errorf("segments not sorted: %q after %q", key, r.Segments[i-1].By["region"])
				}
				if g.Rows != w.Rows || g.Treated != w.Treated.N || g.Control != w.Control.N {
					t.Errorf("segment %s: rows %d/%d/%d, want %d/%d/%d", key, g.Rows, g.Treated, g.Control, w.Rows, w.Treated.N, w.Control.N)
				}
				near(t, key+" ess treated", g.ESS.Treated, w.Treated.ESS, rel)
				near(t, key+" ess control", g.ESS.Control, w.Control.ESS, rel)
				near(t, key+" max |smd|", g.MaxAbsSMDWeighted, w.MaxAbsSMD, rel)
				if supp := w.Treated.N < DefaultMinSegmentRows || w.Control.N < DefaultMinSegmentRows; g.Suppressed != supp {
					t.Errorf("segment %s: suppressed %v, want %v", key, g.Suppressed, supp)
				}
				if g.Suppressed && g.Estimates != nil {
					t.Errorf("segment %s is suppressed but has estimates", key)
				}
			}
		})
	}
}

func equalInts(a, b []int64) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}

// TestSMDDenominator checks the denominators of Austin & Stuart (2015).
func TestSMDDenominator(t *testing.T) {
	for _, c := range []struct {
		estimand   string
		vt, vc, de float64
	}{
		{score.ATE, 4, 2, math.Sqrt(3)},
		{score.Overlap, 4, 2, math.Sqrt(3)},
		{score.ATT, 4, 2, 2},
		{score.ATC, 4, 2, math.Sqrt(2)},
	} {
		if got := smdDenominator(c.estimand, c.vt, c.vc); got != c.de {
			t.Errorf("%s: %v, want %v", c.estimand, got, c.de)
		}
	}
}

// TestBin checks the bin conventions: decile bins are (e[k−1], e[k]];
// propensity histograms are [e[k], e[k+1]) with the last closed, as
// numpy.histogram.
func TestBin(t *testing.T) {
	edges := []float64{0, 0.25, 0.5, 0.75, 1}
	for _, c := range []struct {
		x         float64
		bin, hist int
	}{
		{-1, 0, 0}, {0, 0, 0}, {0.1, 1, 0}, {0.25, 1, 1}, {0.3, 2, 1}, {0.75, 3, 3}, {0.9, 4, 3}, {1, 4, 3}, {2, 5, 3},
	} {
		if got := bin(edges, c.x); got != c.bin {
			t.Errorf("bin(%v) = %d, want %d", c.x, got, c.bin)
		}
		pad, _ := padDeciles(edges)
		if got := bin9(&pad, c.x); got != c.bin {
			t.Errorf("bin9(%v) = %d, want %d", c.x, got, c.bin)
		}
		if got := histBin(edges, c.x); got != c.hist {
			t.Errorf("histBin(%v) = %d, want %d", c.x, got, c.hist)
		}
	}
}
