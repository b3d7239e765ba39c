package fit

import (
	"context"
	"encoding/csv"
	"encoding/json"
	"math"
	"os"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/memory"

	"github.com/heft-project/heft/pipeline"
)

// fitRef is testdata/ref/fit/<case>.json, written by
//
//	/usr/bin/python3 testdata/gen/fit_reference.py
//
// from statsmodels (Logit, OLS), numpy and scipy on the encoding the script
// derives itself from the documented rules.
type fitRef struct {
	Missing  string `json:"missing"`
	MinLevel int    `json:"min_level"`
	Columns  []struct {
		Name             string   `json:"name"`
		Kind             string   `json:"kind"`
		MissingIndicator bool     `json:"missing_indicator"`
		Impute           float64  `json:"impute"`
		Reference        string   `json:"reference"`
		Levels           []string `json:"levels"`
		Pooled           []string `json:"pooled"`
	} `json:"columns"`
	Propensity refGLM `json:"propensity"`
	Outcome    struct {
		Column  string `json:"column"`
		Kind    string `json:"kind"`
		Treated refGLM `json:"treated"`
		Control refGLM `json:"control"`
	} `json:"outcome"`
	Diagnostics struct {
		NTreated  int            `json:"n_treated"`
		NControl  int            `json:"n_control"`
		AUC       float64        `json:"auc"`
		QTreated  []float64      `json:"quantiles_treated"`
		QControl  []float64      `json:"quantiles_control"`
		Below     float64        `json:"share_below_0_01"`
		Above     float64        `json:"share_above_0_99"`
		MissCount map[string]int `json:"missing_counts"`
	} `json:"diagnostics"`
	Reference struct {
		ShareTreated float64 `json:"share_treated"`
		Terms        []struct {
			Term        string    `json:"term"`
			Edges       []float64 `json:"edges"`
			Mean        float64   `json:"mean"`
			SD          float64   `json:"sd"`
			MeanTreated float64   `json:"mean_treated"`
			SDTreated   float64   `json:"sd_treated"`
			MeanControl float64   `json:"mean_control"`
			SDControl   float64   `json:"sd_control"`
		} `json:"terms"`
		PropensityCounts  []float64 `json:"propensity_counts"`
		PropensityDeciles []float64 `json:"propensity_deciles"`
		DecileCounts      []float64 `json:"decile_counts"`
		Propensity        []float64 `json:"propensity"`
	} `json:"reference"`
}

type refGLM struct {
	Terms  []string  `json:"terms"`
	Coef   []float64 `json:"coef"`
	SE     []float64 `json:"se"`
	N      int       `json:"n"`
	Family string    `json:"family"`
	LogLik float64   `json:"loglik"`
	Scale  float64   `json:"scale"`
}

// sampleBatches reads testdata/fixtures/fit/sample.csv into three record
// batches; empty cells of the *_m columns are nulls.
func sampleBatches(t *testing.T, mem memory.Allocator) []arrow.RecordBatch {
	f, err := os.Open("../testdata/fixtures/fit/sample.csv")
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	rows, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	head, rows := rows[0], rows[1:]
	types := map[string]arrow.DataType{
		"t": arrow.PrimitiveTypes.Int64, "age": arrow.PrimitiveTypes.Int64, "income": arrow.PrimitiveTypes.Float64,
		"region": arrow.BinaryTypes.String, "member": arrow.FixedWidthTypes.Boolean, "y": arrow.PrimitiveTypes.Float64,
		"ybin": arrow.PrimitiveTypes.Int64, "income_m": arrow.PrimitiveTypes.Float64, "region_m": dictString,
		"ybin_m": arrow.PrimitiveTypes.Int32,
	}
	var recs []arrow.RecordBatch
	for lo := 0; lo < len(rows); lo += 334 {
		hi := min(lo+334, len(rows))
		cols := make([]col, len(head))
		for j, name := range head {
			c := col{name: name, typ: types[name]}
			for _, r := range rows[lo:hi] {
				s := r[j]
				var v any
				switch {
				case s == "":
				case c.typ.ID() == arrow.INT64 || c.typ.ID() == arrow.INT32:
					k, _ := strconv.Atoi(s)
					v = k
				case c.typ.ID() == arrow.FLOAT64:
					x, _ := strconv.ParseFloat(s, 64)
					v = x
				case c.typ.ID() == arrow.BOOL:
					v = s == "true"
				default:
					v = s
				}
				c.vals = append(c.vals, v)
			}
			cols[j] = c
		}
		recs = append(recs, mkBatch(t, mem, cols...))
	}
	return recs
}

func near(a, b, tol float64) bool {
	return math.Abs(a-b) <= tol*math.Max(1, math.Abs(b))
}

func nearAll(t *testing.T, what string, got, want []float64, tol float64) {
	t.Helper()
	if len(got) != len(want) {
		t.Errorf("%s: %d values, want %d", what, len(got), len(want))
		return
	}
	for i := range got {
		if !near(got[i], want[i], tol) {
			t.Errorf("%s[%d] = %.12g, want %.12g", what, i, got[i], want[i])
		}
	}
}

func qValues(qs []Quantile) []float64 {
	out := make([]float64, len(qs))
	for i, q := range qs {
		out[i] = q.Value
	}
	return out
}

func TestFitReference(t *testing.T) {
	cases := []struct {
		name string
		opt  SampleOptions
	}{
		{"basic", SampleOptions{Treatment: "t", Covariates: []string{"age", "income", "region", "member"}, Outcome: "y"}},
		{"indicator", SampleOptions{Treatment: "t", Covariates: []string{"age", "income_m", "region_m", "member"}, Outcome: "ybin_m"}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			b, err := os.ReadFile("../testdata/ref/fit/" + c.name + ".json")
			if err != nil {
				t.Fatal(err)
			}
			var ref fitRef
			if err := json.Unmarshal(b, &ref); err != nil {
				t.Fatal(err)
			}
			mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
			defer mem.AssertSize(t, 0)
			src := newMemSource(sampleBatches(t, mem)...)
			defer src.Close()
			fr, err := ReadSample(context.Background(), src, c.opt)
			if err != nil {
				t.Fatal(err)
			}
			now := time.Date(2026, 12, 1, 23, 0, 0, 0, time.FixedZone("x", 3600))
			m, e, tt, err := Fit(context.Background(), fr, Options{
				SampleOptions: c.opt, Missing: ref.Missing, MinLevel: ref.MinLevel,
				GLM: GLMOptions{Tol: 1e-14}, HeftVersion: "test", Inputs: []string{"mem.parquet"}, Now: now,
			})
			if err != nil {
				t.Fatal(err)
			}
			if m.Created != "2026-12-01T22:00:00Z" {
				t.Errorf("created %q", m.Created)
			}
			// Encoding.
			for k, rc := range ref.Columns {
				s := m.Encoding.Columns[k]
				if s.Name != rc.Name || s.Kind != rc.Kind || s.MissingIndicator != rc.MissingIndicator || !near(s.Impute, rc.Impute, 1e-14) ||
					s.Reference != rc.Reference || !slices.Equal(s.Levels, rc.Levels) || len(s.Pooled) != len(rc.Pooled) ||
					(len(rc.Pooled) > 0 && !slices.Equal(s.Pooled, rc.Pooled)) {
					t.Errorf("column %d: %+v, want %+v", k, s, rc)
				}
			}
			terms := m.Encoding.Terms()
			if !slices.Equal(terms, ref.Propensity.Terms) {
				t.Fatalf("terms %q, want %q", terms, ref.Propensity.Terms)
			}
			// Models.
			checkGLMRef(t, "propensity", &m.Propensity, &ref.Propensity)
			if m.Outcome == nil || m.Outcome.Kind != ref.Outcome.Kind {
				t.Fatalf("outcome models %+v", m.Outcome)
			}
			checkGLMRef(t, "treated outcome", &m.Outcome.Treated, &ref.Outcome.Treated)
			checkGLMRef(t, "control outcome", &m.Outcome.Control, &ref.Outcome.Control)
			nearAll(t, "propensity", e, ref.Reference.Propensity, 1e-9)
			// Diagnostics.
			d, rd := m.Diagnostics, ref.Diagnostics
			if d.NTreated != rd.NTreated || d.NControl != rd.NControl || d.SampleRows != 1000 || d.RowsRead != 1000 || d.Sampled {
				t.Errorf("diagnostics counts %+v", d)
			}
			if !near(d.AUC, rd.AUC, 1e-12) || !near(d.ShareBelow001, rd.Below, 0) || !near(d.ShareAbove099, rd.Above, 0) {
				t.Errorf("AUC %v (want %v), shares %v %v", d.AUC, rd.AUC, d.ShareBelow001, d.ShareAbove099)
			}
			nearAll(t, "treated quantiles", qValues(d.PropensityQuantiles.Treated), rd.QTreated, 1e-9)
			nearAll(t, "control quantiles", qValues(d.PropensityQuantiles.Control), rd.QControl, 1e-9)
			if len(d.MissingCounts) != len(rd.MissCount) {
				t.Errorf("missing counts %v, want %v", d.MissingCounts, rd.MissCount)
			}
			for k, v := range rd.MissCount {
				if d.MissingCounts[k] != v {
					t.Errorf("missing counts %v, want %v", d.MissingCounts, rd.MissCount)
				}
			}
			// Reference.
			r, rr := m.Reference, ref.Reference
			if !near(r.ShareTreated, rr.ShareTreated, 1e-15) || len(r.Terms) != len(rr.Terms) {
				t.Fatalf("reference %v terms, share %v", len(r.Terms), r.ShareTreated)
			}
			for j, want := range rr.Terms {
				got := r.Terms[j]
				if got.Term != want.Term {
					t.Fatalf("reference term %q, want %q", got.Term, want.Term)
				}
				nearAll(t, want.Term+" edges", got.Edges, want.Edges, 1e-12)
				nearAll(t, want.Term+" moments",
					[]float64{got.Mean, got.SD, got.MeanTreated, got.SDTreated, got.MeanControl, got.SDControl},
					[]float64{want.Mean, want.SD, want.MeanTreated, want.SDTreated, want.MeanControl, want.SDControl}, 1e-12)
			}
			if len(r.PropensityEdges) != 51 || r.PropensityEdges[0] != 0 || r.PropensityEdges[50] != 1 {
				t.Errorf("propensity edges %v", r.PropensityEdges)
			}
			nearAll(t, "propensity counts", r.PropensityCounts, rr.PropensityCounts, 0)
			nearAll(t, "propensity deciles", r.PropensityDeciles, rr.PropensityDeciles, 1e-9)
			nearAll(t, "decile counts", r.DecileCounts, rr.DecileCounts, 0)

			// The model survives its file, and scoring the same batches
			// through Bind/Encode gives the fit's propensities.
			mb, err := m.Marshal()
			if err != nil {
				t.Fatal(err)
			}
			m2, err := Unmarshal(mb)
			if err != nil {
				t.Fatal(err)
			}
			enc, err := m2.Encoding.Bind(src.Schema(), "mem.parquet", true, UnseenError)
			if err != nil {
				t.Fatal(err)
			}
			var batch Batch
			eta := make([]float64, 334)
			row := 0
			for k, rec := range src.recs {
				if err := enc.Encode(rec, pipeline.Location{File: "mem.parquet", RowGroup: k}, &batch); err != nil {
					t.Fatal(err)
				}
				LinearPredictor(&m2.Propensity, Design{N: batch.N, Cols: batch.X}, eta)
				for i := range batch.N {
					if p := invLogit(eta[i]); !near(p, e[row], 1e-12) || batch.T[i] != tt[row] {
						t.Fatalf("row %d: scored e %v t %d, fitted e %v t %d", row, p, batch.T[i], e[row], tt[row])
					}
					row++
				}
			}
		})
	}
}

func checkGLMRef(t *testing.T, what string, g *GLM, r *refGLM) {
	t.Helper()
	if g.Family != r.Family || g.N != r.N || !g.Converged || !slices.Equal(g.Terms, r.Terms) {
		t.Errorf("%s: family %s n %d converged %v terms %q; want %s n %d terms %q", what, g.Family, g.N, g.Converged, g.Terms, r.Family, r.N, r.Terms)
	}
	nearAll(t, what+" coef", g.Coef, r.Coef, 1e-7)
	nearAll(t, what+" se", g.SE, r.SE, 1e-7)
	if r.Family == FamilyBinomial && !near(g.LogLik, r.LogLik, 1e-10) {
		t.Errorf("%s: loglik %v, want %v", what, g.LogLik, r.LogLik)
	}
	if r.Family == FamilyGaussian && !near(g.Scale, r.Scale, 1e-10) {
		t.Errorf("%s: scale %v, want %v", what, g.Scale, r.Scale)
	}
}

func TestFitRefusals(t *testing.T) {
	cols := []col{
		{"t", arrow.PrimitiveTypes.Int64, anys(0, 1, 0, 1, 0, 1)},
		{"x", arrow.PrimitiveTypes.Float64, anys(1.0, 2.0, 0.5, 4.0, 1.5, 2.5)},
		{"s", arrow.BinaryTypes.String, anys("a", "b", "a", "b", "c", "c")},
		{"xm", arrow.PrimitiveTypes.Float64, anys(1.0, nil, 0.5, 4.0, 1.5, 2.5)},
		{"arm", arrow.BinaryTypes.String, anys("p", "q", "p", "q", "p", "q")},
	}
	cases := []struct {
		name string
		opt  Options
		want string
	}{
		{"string treatment needs treated value", Options{SampleOptions: SampleOptions{Treatment: "arm", Covariates: []string{"x"}}}, "needs the treated value"},
		{"three-valued treatment", Options{SampleOptions: SampleOptions{Treatment: "s", Covariates: []string{"x"}}, TreatedValue: "a"}, "two arms are needed"},
		{"missing under error", Options{SampleOptions: SampleOptions{Treatment: "t", Covariates: []string{"xm"}}}, `column "xm"`},
		{"bad missing policy", Options{SampleOptions: SampleOptions{Treatment: "t", Covariates: []string{"x"}}, Missing: "drop"}, "missing-value policy"},
		{"bad outcome kind", Options{SampleOptions: SampleOptions{Treatment: "t", Covariates: []string{"s"}, Outcome: "x"}, OutcomeKind: "binary"}, "declared binary"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			fr := frameOf(t, c.opt.SampleOptions, cols...)
			_, _, _, err := Fit(context.Background(), fr, c.opt)
			if err == nil || !strings.Contains(err.Error(), c.want) {
				t.Fatalf("error %v, want %q", err, c.want)
			}
		})
	}
}
