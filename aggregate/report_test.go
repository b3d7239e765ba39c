package aggregate

import (
	"bytes"
	"encoding/json"
	"strings"
	"testing"

	"github.com/heft-project/heft/score"
)

func fixtureReport(t *testing.T, cfg func(*Config)) *Report {
	t.Helper()
	fx := loadFixture(t)
	c := fx.config(score.ATE)
	if cfg != nil {
		cfg(&c)
	}
	s, err := New(c, fixtureSchema)
	if err != nil {
		t.Fatal(err)
	}
	s.Inputs = []string{"s3://bucket/table/part-0.parquet"}
	feed(t, s, fx.parts(t, score.ATE, []int{2000}))
	return s.Report()
}

// TestReportJSON checks the report's minimum contract (schema.md): the keys
// are there, with null for undefined numbers, and it reads back.
func TestReportJSON(t *testing.T) {
	r := fixtureReport(t, func(c *Config) { c.Gate = Gate{MaxSMD: 0.01} })
	var buf bytes.Buffer
	if err := r.WriteJSON(&buf); err != nil {
		t.Fatal(err)
	}
	var m map[string]any
	if err := json.Unmarshal(buf.Bytes(), &m); err != nil {
		t.Fatal(err)
	}
	for _, k := range []string{"report_version", "rows", "treated", "control", "estimand", "policy", "model_checksum", "inputs",
		"run_seconds", "estimates", "ess", "balance", "overlap", "drift", "gate", "segments", "warnings", "caution"} {
		if _, ok := m[k]; !ok {
			t.Errorf("report has no %q", k)
		}
	}
	est := m["estimates"].(map[string]any)["ate"].(map[string]any)
	for _, e := range []string{"ipw", "hajek", "aipw"} {
		v, ok := est[e].(map[string]any)
		if !ok {
			t.Errorf("no ate %s estimate", e)
			continue
		}
		for _, k := range []string{"estimate", "se", "se_with_model_uncertainty", "ci_low", "ci_high"} {
			if _, ok := v[k]; !ok {
				t.Errorf("ate %s has no %s", e, k)
			}
		}
	}
	b := m["balance"].([]any)[0].(map[string]any)
	for _, k := range []string{"term", "mean_treated", "mean_control", "mean_treated_weighted", "mean_control_weighted",
		"smd_unweighted", "smd_weighted", "variance_ratio_weighted", "ks_weighted"} {
		if _, ok := b[k]; !ok {
			t.Errorf("balance row has no %s", k)
		}
	}
	seg := m["segments"].([]any)
	if by := seg[0].(map[string]any)["by"].(map[string]any)["region"]; by != NullValue {
		t.Errorf("first segment is %v, want the null region first", by)
	}
	if !r.Failed() || m["gate"].(map[string]any)["passed"] != false {
		t.Error("a gate of 0.01 passed")
	}
	if m["caution"] != Caution {
		t.Error("no caution")
	}
	// a report read back from its JSON writes the same text
	var back Report
	if err := json.Unmarshal(buf.Bytes(), &back); err != nil {
		t.Fatalf("report does not read back: %v", err)
	}
	var t1, t2 bytes.Buffer
	if err := r.WriteText(&t1); err != nil {
		t.Fatal(err)
	}
	if err := back.WriteText(&t2); err != nil {
		t.Fatal(err)
	}
	if t1.String() != t2.String() {
		t.Errorf("text from the JSON differs:\n%s\nvs\n%s", t2.String(), t1.String())
	}
	if back.Failed() != r.Failed() {
		t.Error("gate result lost in JSON")
	}
}

// TestReportText checks the terminal summary has its sections, aligned
// columns and the caution.
func TestReportText(t *testing.T) {
	r := fixtureReport(t, nil)
	var buf bytes.Buffer
	if err := r.WriteText(&buf); err != nil {
		t.Fatal(err)
	}
	out := buf.String()
	for _, want := range []string{"Estimates (95% confidence intervals)", "hajek", "Effective sample size", "Balance", "cat=b",
		"Overlap", "Drift since the fit", "Segments by region", "suppressed", "Warnings", Caution} {
		if !strings.Contains(out, want) {
			t.Errorf("text summary has no %q:\n%s", want, out)
		}
	}
	// the balance table's columns line up: every row as long as the header
	lines := strings.Split(out, "\n")
	for i, l := range lines {
		if strings.HasPrefix(strings.TrimSpace(l), "term") {
			for _, row := range lines[i+1 : i+6] {
				if len(row) != len(l) {
					t.Errorf("balance row %q is not as wide as the header %q", row, l)
				}
			}
			break
		}
	}
	if testing.Verbose() {
		t.Log("\n" + out)
	}
}

func TestReportWarnings(t *testing.T) {
	r := fixtureReport(t, nil)
	joined := strings.Join(r.Warnings, "\n")
	for _, want := range []string{"null treatment", "Positivity", "not seen at fit", "suppressed"} {
		if !strings.Contains(joined, want) {
			t.Errorf("no warning about %q in\n%s", want, joined)
		}
	}
}

// TestEmptyReport checks that a run without rows still writes both forms,
// with null for every undefined figure.
func TestEmptyReport(t *testing.T) {
	fx := loadFixture(t)
	s, err := New(fx.config(score.ATT), fixtureSchema)
	if err != nil {
		t.Fatal(err)
	}
	r := s.Report()
	var j, txt bytes.Buffer
	if err := r.WriteJSON(&j); err != nil {
		t.Fatal(err)
	}
	if err := r.WriteText(&txt); err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(j.String(), `"psi": null`) || !strings.Contains(txt.String(), "No treated rows") {
		t.Errorf("empty report:\n%s\n%s", j.String(), txt.String())
	}
}
