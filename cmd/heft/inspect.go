package main

import (
	"encoding/json"
	"fmt"

	"github.com/spf13/cobra"

	"github.com/heft-project/heft/fit"
)

// termJSON is one coefficient in `heft inspect --json`.
type termJSON struct {
	Name string  `json:"name"`
	Coef float64 `json:"coef"`
	SE   float64 `json:"se"`
}

type glmJSON struct {
	Family     string     `json:"family"`
	Terms      []termJSON `json:"terms"`
	N          int        `json:"n"`
	LogLik     float64    `json:"loglik"`
	Iterations int        `json:"iterations"`
	Converged  bool       `json:"converged"`
	Ridge      float64    `json:"ridge,omitempty"`
	Warnings   []string   `json:"warnings,omitempty"`
}

type inspectJSON struct {
	Format        string          `json:"format"`
	FormatVersion int             `json:"format_version"`
	Checksum      string          `json:"checksum"`
	HeftVersion   string          `json:"heft_version"`
	Created       string          `json:"created"`
	Inputs        []string        `json:"inputs"`
	Treatment     fit.Treatment   `json:"treatment"`
	Propensity    glmJSON         `json:"propensity"`
	Outcome       *outcomeJSON    `json:"outcome,omitempty"`
	Diagnostics   fit.Diagnostics `json:"diagnostics"`
}

type outcomeJSON struct {
	Kind    string  `json:"kind"`
	Treated glmJSON `json:"treated"`
	Control glmJSON `json:"control"`
}

func glmView(g *fit.GLM) glmJSON {
	v := glmJSON{Family: g.Family, N: g.N, LogLik: g.LogLik, Iterations: g.Iterations, Converged: g.Converged, Ridge: g.Ridge, Warnings: g.Warnings}
	for i, name := range g.Terms {
		v.Terms = append(v.Terms, termJSON{Name: name, Coef: g.Coef[i], SE: g.SE[i]})
	}
	return v
}

func newInspectCmd(env *Env) *cobra.Command {
	var asJSON bool
	cmd := &cobra.Command{
		Use:   "inspect [--json] MODEL.json",
		Short: "Print a model file's summary (or its coefficients as JSON)",
		Args:  usageArgs(cobra.ExactArgs(1)),
		RunE: func(cmd *cobra.Command, args []string) error {
			m, err := fit.Load(args[0])
			if err != nil {
				return modelError{err}
			}
			if !asJSON {
				writeModelSummary(env.Stdout, m)
				return nil
			}
			v := inspectJSON{Format: m.Format, FormatVersion: m.FormatVersion, Checksum: m.Checksum, HeftVersion: m.HeftVersion,
				Created: m.Created, Inputs: m.Inputs, Treatment: m.Encoding.Treatment, Propensity: glmView(&m.Propensity), Diagnostics: m.Diagnostics}
			if o := m.Outcome; o != nil {
				v.Outcome = &outcomeJSON{Kind: o.Kind, Treated: glmView(&o.Treated), Control: glmView(&o.Control)}
			}
			b, err := json.MarshalIndent(v, "", "  ")
			if err != nil {
				return err
			}
			_, err = fmt.Fprintf(env.Stdout, "%s\n", b)
			return err
		},
	}
	cmd.Flags().BoolVar(&asJSON, "json", false, "print JSON: propensity.terms [{name, coef, se}] and outcome.treated/control.terms")
	return cmd
}
