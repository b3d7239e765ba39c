package htmlreport

import (
	"bytes"
	"encoding/json"
	"flag"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"

	"github.com/heft-project/heft/aggregate"
	"github.com/heft-project/heft/score"
)

var update = flag.Bool("update", false, "rewrite testdata/structure.golden from the current rendering")

// demoOptions are the words of the demo scenario the fixture comes from.
var demoOptions = Options{
	Title: "Home energy audit (invented demo data)", OutcomeLabel: "next-winter gas use", Unit: "kWh",
	TreatmentLabel: "the audit", PopulationLabel: "households", HeftVersion: "test",
}

// loadFixture reads testdata/report.json, a report written by heft itself
// (see testdata/README.md for the command).
func loadFixture(t testing.TB) *aggregate.Report {
	t.Helper()
	data, err := os.ReadFile(filepath.Join("testdata", "report.json"))
	if err != nil {
		t.Fatal(err)
	}
	var r aggregate.Report
	if err := json.Unmarshal(data, &r); err != nil {
		t.Fatalf("testdata/report.json: %v", err)
	}
	return &r
}

func render(t testing.TB, r *aggregate.Report, opt Options) string {
	t.Helper()
	var b bytes.Buffer
	if err := Render(&b, r, opt); err != nil {
		t.Fatalf("Render: %v", err)
	}
	return b.String()
}

var (
	reSection = regexp.MustCompile(`<(?:section|header) id="([^"]+)"`)
	reTable   = regexp.MustCompile(`(?s)<table id="([^"]+)">\s*<thead>(.*?)</thead>\s*<tbody>(.*?)</tbody>`)
	reTH      = regexp.MustCompile(`(?s)<th[^>]*>(.*?)</th>`)
	reTR      = regexp.MustCompile(`<tr[ >]`)
	reSVG     = regexp.MustCompile(`(?s)<svg id="chart-([a-z]+)"(.*?)</svg>`)
	reDrawn   = regexp.MustCompile(`<(?:path|text|image)[ >]`)
	reTag     = regexp.MustCompile(`<[^>]*>`)
)

// structure summarizes the page's structure, not its pixels: section ids,
// each table's headers and row count, and each chart's presence.
func structure(page string) string {
	var b strings.Builder
	var ids []string
	for _, m := range reSection.FindAllStringSubmatch(page, -1) {
		ids = append(ids, m[1])
	}
	fmt.Fprintf(&b, "sections: %s\n", strings.Join(ids, " "))
	for _, m := range reTable.FindAllStringSubmatch(page, -1) {
		var hs []string
		for _, h := range reTH.FindAllStringSubmatch(m[2], -1) {
			hs = append(hs, reTag.ReplaceAllString(h[1], ""))
		}
		fmt.Fprintf(&b, "table %s: %d rows: %s\n", m[1], len(reTR.FindAllString(m[3], -1)), strings.Join(hs, " | "))
	}
	for _, m := range reSVG.FindAllStringSubmatch(page, -1) {
		state := "empty"
		if len(reDrawn.FindAllString(m[2], -1)) > 10 {
			state = "drawn"
		}
		fmt.Fprintf(&b, "chart %s: %s\n", m[1], state)
	}
	return b.String()
}

func TestRenderStructureGolden(t *testing.T) {
	r := loadFixture(t)
	page := render(t, r, demoOptions)
	got := structure(page)
	golden := filepath.Join("testdata", "structure.golden")
	if *update {
		if err := os.WriteFile(golden, []byte(got), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	want, err := os.ReadFile(golden)
	if err != nil {
		t.Fatalf("%v (run go test ./aggregate/htmlreport -run Golden -update)", err)
	}
	if got != string(want) {
		t.Errorf("page structure changed; if intended, run go test ./aggregate/htmlreport -run Golden -update\ngot:\n%s\nwant:\n%s", got, want)
	}
	// Independent of the golden file: one balance row per term, every chart.
	if n := strings.Count(tableBody(page, "balance-table"), "<tr"); n != len(r.Balance) {
		t.Errorf("balance table has %d rows, the report %d terms", n, len(r.Balance))
	}
	for _, name := range []string{"balance", "overlap", "weights", "drift"} {
		if !strings.Contains(got, "chart "+name+": drawn") {
			t.Errorf("chart %s missing or empty", name)
		}
	}
}

func tableBody(page, id string) string {
	for _, m := range reTable.FindAllStringSubmatch(page, -1) {
		if m[1] == id {
			return m[3]
		}
	}
	return ""
}

// TestSelfContained checks the hard requirements on the file: no
// scripts, no external references, print CSS, the caution.
func TestSelfContained(t *testing.T) {
	page := render(t, loadFixture(t), demoOptions)
	low := strings.ToLower(page)
	for _, bad := range []string{"<script", "javascript:", "<link", "@import", "src=\"http", "href=\"http", "url(http", "<iframe", "<object", "<embed"} {
		if strings.Contains(low, bad) {
			t.Errorf("page contains %q", bad)
		}
	}
	for _, want := range []string{"@media print", "break-before: page", aggregate.Caution, "<!DOCTYPE html>"} {
		if !strings.Contains(page, want) {
			t.Errorf("page lacks %q", want)
		}
	}
	// Warnings come before the effects.
	if w, e := strings.Index(page, `id="warnings"`), strings.Index(page, `id="effects"`); !(w >= 0 && w < e) {
		t.Errorf("warnings section at %d, effects at %d: want warnings first", w, e)
	}
}

// TestTermNamesEscaped: column names are user data and end up in both the
// HTML and the SVG text.
func TestTermNamesEscaped(t *testing.T) {
	r := loadFixture(t)
	r.Balance[0].Term = `<b onmouseover="x">&`
	r.Drift.Terms[0].Term = r.Balance[0].Term
	page := render(t, r, Options{})
	if strings.Contains(page, `<b onmouseover`) {
		t.Error("a term name reached the page unescaped")
	}
}

func nan() aggregate.Float { return aggregate.Float(math.NaN()) }

// emptyReport is a run in which nothing could be estimated: no rows in the
// treated arm, no outcome, no propensity deciles.
func emptyReport() *aggregate.Report {
	r := &aggregate.Report{
		ReportVersion: 1, Rows: 5, Control: 5, Estimand: score.ATE, Policy: score.Policy{Estimand: score.ATE},
		Estimates: map[string]map[string]aggregate.EstimateReport{},
		ESS:       aggregate.Arms{Treated: nan(), Control: 5}, ESSShare: aggregate.Arms{Treated: nan(), Control: 1},
		SumWeights: aggregate.Arms{Treated: 0, Control: 10},
		Balance: []aggregate.BalanceRow{{Term: "x", SMDUnweighted: nan(), SMDWeighted: nan(), VarianceRatioWeighted: nan(), KSWeighted: nan(),
			MeanTreated: nan(), MeanControl: 1, MeanTreatedWeighted: nan(), MeanControlWeighted: 1}},
		Drift:    aggregate.Drift{PSI: nan(), Terms: []aggregate.TermShift{{Term: "x", ShiftSD: nan(), Mean: nan()}}},
		Warnings: []string{"No treated rows: effects and balance are undefined."},
	}
	r.Overlap.Edges = []float64{0, 0.5, 1}
	r.Overlap.Counts.Treated = []int64{0, 0}
	r.Overlap.Counts.Control = []int64{3, 2}
	r.Overlap.Weighted.Treated = []aggregate.Float{0, 0}
	r.Overlap.Weighted.Control = []aggregate.Float{6, 4}
	r.Overlap.LargestWeightsShare = aggregate.Arms{Treated: nan(), Control: 0.5}
	return r
}

// TestRenderDegenerate: undefined figures render as dashes, not as errors,
// panics or "NaN".
func TestRenderDegenerate(t *testing.T) {
	tests := []struct {
		name string
		edit func(r *aggregate.Report)
		want []string
	}{
		{"no treated rows", func(*aggregate.Report) {}, []string{"No effects were estimated", "not computable", "No treated rows"}},
		{"no terms", func(r *aggregate.Report) { r.Balance, r.Drift.Terms = nil, nil }, []string{`id="chart-balance"`, `id="chart-drift"`}},
		{"inf SMD", func(r *aggregate.Report) { r.Balance[0].SMDUnweighted = aggregate.Float(math.Inf(1)) }, []string{"∞"}},
		{"segments without by", func(r *aggregate.Report) {
			r.Segments = []aggregate.SegmentReport{{By: map[string]string{"region": "north"}, Rows: 5, Suppressed: true, ESS: aggregate.Arms{Treated: nan(), Control: 5}, MaxAbsSMDWeighted: nan()}}
		}, []string{`id="segments"`, "north", "suppressed"}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			r := emptyReport()
			tt.edit(r)
			page := render(t, r, Options{})
			for _, w := range tt.want {
				if !strings.Contains(page, w) {
					t.Errorf("page lacks %q", w)
				}
			}
			if strings.Contains(page, "NaN") {
				t.Error(`page shows "NaN"`)
			}
		})
	}
	if _, err := Figures(nil); err == nil {
		t.Error("Figures(nil): no error")
	}
	r := emptyReport()
	r.Overlap.Counts.Treated = []int64{1}
	if err := Render(&bytes.Buffer{}, r, Options{}); err == nil || !strings.Contains(err.Error(), "overlap") {
		t.Errorf("mismatched overlap bins: error %v, want one naming the overlap", err)
	}
	r = emptyReport()
	r.Overlap.Weighted.Control = nil
	if err := Render(&bytes.Buffer{}, r, Options{}); err == nil || !strings.Contains(err.Error(), "control arm has 0 weighted propensity bins") {
		t.Errorf("missing weighted bins: error %v, want one naming the arm", err)
	}
}

func TestNum(t *testing.T) {
	tests := []struct {
		v    float64
		want string
	}{
		{0, "0"},
		{-890.04, "−890.0"},
		{1234.6, "1235"},
		{0.012345, "0.01235"},
		{123456789, "123,456,789"},
		{-44994.4, "−44,994"},
		{2.5e-7, "2.5e-07"},
		{-2.5e-7, "−2.5e-07"},
		{math.NaN(), "–"},
		{math.Inf(1), "–"},
	}
	for _, tt := range tests {
		if got := num(tt.v); got != tt.want {
			t.Errorf("num(%v) = %q, want %q", tt.v, got, tt.want)
		}
	}
	for v, want := range map[float64]string{-0.0001: "0.000", 0.1234: "0.123", math.Inf(-1): "−∞", math.NaN(): "–"} {
		if got := fixed3(v); got != want {
			t.Errorf("fixed3(%v) = %q, want %q", v, got, want)
		}
	}
}

func TestSentence(t *testing.T) {
	e := aggregate.EstimateReport{Estimate: -890, SE: 10, CILow: -909.6, CIHigh: -870.4}
	got := sentence(score.ATE, "aipw", e, demoOptions.withDefaults(), "households")
	want := "Among all households, the audit changed next-winter gas use by −890.0 kWh on average (95% CI −909.6 to −870.4 kWh; AIPW (doubly robust))."
	if got != want {
		t.Errorf("got  %s\nwant %s", got, want)
	}
	e.CIHigh = 5
	if got := sentence(score.ATC, "hajek", e, Options{}.withDefaults(), "rows"); !strings.Contains(got, "would have changed the outcome") || !strings.Contains(got, "includes no change") {
		t.Errorf("ATC with an interval across 0: %s", got)
	}
}

func TestPNG(t *testing.T) {
	figs, err := Figures(loadFixture(t))
	if err != nil {
		t.Fatal(err)
	}
	for _, f := range figs {
		var b bytes.Buffer
		if err := f.WritePNG(&b, 72); err != nil {
			t.Fatal(err)
		}
		if !bytes.HasPrefix(b.Bytes(), []byte("\x89PNG\r\n\x1a\n")) {
			t.Errorf("%s: not a PNG", f.Name)
		}
	}
	if err := figs[0].WritePNG(&bytes.Buffer{}, 0); err == nil {
		t.Error("0 dpi: no error")
	}
}
