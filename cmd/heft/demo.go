package main

import (
	"context"
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"strings"

	"github.com/spf13/cobra"

	"github.com/heft-project/heft/cmd/heft/scenario"
)

type demoFlags struct {
	dir        string
	rows       int64
	seed       uint64
	files      int
	sampleRows int
	dataOnly   bool
}

func newDemoCmd(env *Env) *cobra.Command {
	var f demoFlags
	cmd := &cobra.Command{
		Use:   "demo [--dir DIR] [--rows N]",
		Short: "Write the built-in demo table and run every phase of heft on it",
		Long: `Demo writes an invented scenario as Parquet — a regional utility offered
households a free home energy audit; did the audit lower next winter's gas
use? — with the generator's true effects in truth.json, then runs heft fit
and heft score on it and compares the estimates with the truth. The data is
made up; no real households are in it.`,
		Args: usageArgs(cobra.NoArgs),
		RunE: func(cmd *cobra.Command, _ []string) error {
			return runDemo(cmd.Context(), env, &f)
		},
	}
	fl := cmd.Flags()
	fl.StringVar(&f.dir, "dir", "heft-demo", "directory for the demo's files")
	fl.Int64Var(&f.rows, "rows", 1_000_000, "rows to generate")
	fl.Uint64Var(&f.seed, "seed", 20261201, "generator seed")
	fl.IntVar(&f.files, "files", 1, "split the table into this many Parquet files")
	fl.IntVar(&f.sampleRows, "sample-rows", 200_000, "rows to fit the models on (reservoir sample)")
	fl.BoolVar(&f.dataOnly, "data-only", false, "only write the data and truth.json")
	return cmd
}

func runDemo(ctx context.Context, env *Env, f *demoFlags) error {
	env.Logf("heft demo: writing %d invented households to %s", f.rows, f.dir)
	truth, paths, err := scenario.Write(ctx, f.dir, scenario.Options{Rows: f.rows, Seed: f.seed, Files: f.files})
	if err != nil {
		return outputError{err}
	}
	data := paths[0]
	if len(paths) > 1 {
		data = f.dir + string(filepath.Separator)
	}
	env.Logf("heft demo: %d rows, %d audited; true ATE %.1f, ATT %.1f %s (truth.json)", truth.Rows, truth.Treated, truth.ATE, truth.ATT, truth.Unit)
	if f.dataOnly {
		return nil
	}
	model := filepath.Join(f.dir, "model.json")
	steps := [][]string{
		{"fit", "-o", model, "--treatment", scenario.ColTreatment, "--covariates", strings.Join(scenario.Covariates, ","),
			"--outcome", scenario.ColOutcome, "--sample-rows", fmt.Sprint(f.sampleRows), "--seed", fmt.Sprint(f.seed), data},
		{"score", "--model", model, "-o", filepath.Join(f.dir, "scored.parquet"), "--estimand", "ate", "--predictions",
			"--state", filepath.Join(f.dir, "state.json"), "--report", filepath.Join(f.dir, "report.json"), data},
		{"report", "-o", filepath.Join(f.dir, "report.html"), "--title", "Home energy audit (invented demo data)",
			"--treatment", "the audit", "--outcome", "next-winter gas use", "--unit", "kWh", "--population", "households",
			filepath.Join(f.dir, "report.json")},
	}
	if len(paths) > 1 {
		steps[1][4] = filepath.Join(f.dir, "scored") + string(filepath.Separator)
	}
	for _, args := range steps {
		env.Logf("\n$ heft %s", strings.Join(args, " "))
		root := newRoot(env)
		root.SetArgs(args)
		if err := root.ExecuteContext(ctx); err != nil {
			return err
		}
	}
	return demoVerdict(env, f.dir, truth)
}

// z95 is the standard normal's 0.975 quantile.
const z95 = 1.959963984540054

// demoVerdict compares the report's estimates with the generator's truth.
func demoVerdict(env *Env, dir string, truth *scenario.Truth) error {
	b, err := os.ReadFile(filepath.Join(dir, "report.json"))
	if err != nil {
		return err
	}
	var rep struct {
		Estimates map[string]map[string]struct {
			Estimate float64 `json:"estimate"`
			CILow    float64 `json:"ci_low"`
			CIHigh   float64 `json:"ci_high"`
			SEModel  float64 `json:"se_with_model_uncertainty"`
		} `json:"estimates"`
	}
	if err := json.Unmarshal(b, &rep); err != nil {
		return fmt.Errorf("%s: %w", filepath.Join(dir, "report.json"), err)
	}
	env.Logf("\nheft demo: estimates against the generator's truth (%s)", truth.Unit)
	env.Logf("  The models were fitted on a sample, so the interval that counts is the one")
	env.Logf("  with the model's own uncertainty (delta method); the narrower one treats the")
	env.Logf("  fitted model as known.")
	env.Logf("  %-7s %-5s %10s  %-22s  %-22s  %8s", "", "", "estimate", "95% CI, model fixed", "95% CI, with model", "truth")
	for _, c := range []struct {
		estimand string
		truth    float64
	}{{"ate", truth.ATE}, {"att", truth.ATT}, {"atc", truth.ATC}, {"overlap", truth.Overlap}} {
		for _, est := range []string{"ipw", "hajek", "aipw"} {
			e, ok := rep.Estimates[c.estimand][est]
			if !ok {
				continue
			}
			lo, hi := e.Estimate-z95*e.SEModel, e.Estimate+z95*e.SEModel
			verdict := "covered"
			if c.truth < lo || c.truth > hi {
				verdict = "MISSED"
			}
			env.Logf("  %-7s %-5s %10.1f  %-22s  %-22s  %8.1f  %s", c.estimand, est, e.Estimate,
				fmt.Sprintf("[%.1f, %.1f]", e.CILow, e.CIHigh), fmt.Sprintf("[%.1f, %.1f]", lo, hi), c.truth, verdict)
		}
	}
	env.Logf("\nheft demo: files in %s: demo data, truth.json, model.json, scored table, state.json, report.json", dir)
	env.Logf("heft demo: open %s in a browser for the report with charts", filepath.Join(dir, "report.html"))
	return nil
}
