package main

import (
	"math"
	"path/filepath"
	"strings"
	"testing"

	"github.com/heft-project/heft/cmd/heft/scenario"
)

// Published property (Li, Morgan & Zaslavsky 2018, "Balancing covariates
// via propensity score weighting", JASA 113:390–400): when the propensity is a logistic regression fitted by maximum
// likelihood on the same rows, overlap weights T·(1−e) + (1−T)·e balance the
// weighted means of every term in that model exactly. The score equations
// Σ (T − e)·x = 0 say Σ T(1−e)x = Σ (1−T)e·x, and with the intercept the two
// arms' total weights are equal too. So every weighted SMD in the report is
// 0 up to the fit's convergence: checked to 1e-8 here.
func TestOverlapWeightsBalanceExactly(t *testing.T) {
	dir := t.TempDir()
	_, paths, err := scenario.Write(t.Context(), filepath.Join(dir, "data"), scenario.Options{Rows: 40000, Seed: 11})
	if err != nil {
		t.Fatal(err)
	}
	model := filepath.Join(dir, "model.json")
	// every row, no sample: the property needs the fit and the scored rows to be the same
	mustHeft(t, "fit", "-q", "-o", model, "--treatment", scenario.ColTreatment, "--covariates", strings.Join(scenario.Covariates, ","), paths[0])
	maxSMD := func(estimand string) float64 {
		report := filepath.Join(dir, estimand+".json")
		mustHeft(t, "score", "-q", "--model", model, "--estimand", estimand, "--report-only", "--report", report, paths[0])
		rows := readReport(t, report)["balance"].([]any)
		if len(rows) != 16 {
			t.Fatalf("%d balance rows, want the model's 16 terms", len(rows))
		}
		worst := 0.0
		for _, r := range rows {
			worst = math.Max(worst, math.Abs(r.(map[string]any)["smd_weighted"].(float64)))
		}
		return worst
	}
	if got := maxSMD("overlap"); got > 1e-8 {
		t.Errorf("largest weighted |SMD| under overlap weights %g, want 0 (to 1e-8)", got)
	}
	// The property is special to overlap weights: ATE weights balance only
	// approximately, so the check above can tell the difference.
	if got := maxSMD("ate"); got < 1e-4 {
		t.Errorf("largest weighted |SMD| under ATE weights %g: expected visible imbalance", got)
	}
}
