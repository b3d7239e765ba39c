package main

import (
	"fmt"
	"io"
	"strings"
	"text/tabwriter"

	"github.com/heft-project/heft/fit"
)

// writeModelSummary prints a model file in a form a person reads: what was
// fitted on what, how well it converged, the coefficients, and the
// positivity figures of the fit sample.
func writeModelSummary(w io.Writer, m *fit.Model) {
	d := m.Diagnostics
	fmt.Fprintf(w, "model      %s (format %s v%d, heft %s, fitted %s)\n", m.Checksum, m.Format, m.FormatVersion, m.HeftVersion, m.Created)
	fmt.Fprintf(w, "inputs     %s\n", strings.Join(m.Inputs, ", "))
	how := "every row"
	if d.Sampled {
		how = fmt.Sprintf("reservoir sample, seed %d", d.Seed)
	}
	fmt.Fprintf(w, "sample     %d of %d rows read (%s): %d treated, %d control\n", d.SampleRows, d.RowsRead, how, d.NTreated, d.NControl)
	enc := m.Encoding
	fmt.Fprintf(w, "treatment  %s (treated = %s)\n", enc.Treatment.Column, enc.Treatment.TreatedValue)
	p := m.Propensity
	conv := "converged"
	if !p.Converged {
		conv = "NOT converged"
	}
	fmt.Fprintf(w, "propensity logistic, %d terms, %s in %d iterations (tol %g), log-likelihood %.4f, AUC %.4f\n",
		len(p.Terms), conv, p.Iterations, p.Tol, p.LogLik, d.AUC)
	if p.Ridge > 0 {
		fmt.Fprintf(w, "           ridge λ = %g on standardized terms\n", p.Ridge)
	}
	fmt.Fprintf(w, "positivity %.2f%% of the sample has e < 0.01, %.2f%% has e > 0.99\n", 100*d.ShareBelow001, 100*d.ShareAbove099)
	writeQuantiles(w, "e treated", d.PropensityQuantiles.Treated)
	writeQuantiles(w, "e control", d.PropensityQuantiles.Control)
	fmt.Fprintln(w)
	writeTerms(w, "propensity coefficients (original scale)", &p)
	if o := m.Outcome; o != nil {
		fmt.Fprintln(w)
		writeTerms(w, fmt.Sprintf("outcome model, treated arm (%s, n=%d)", o.Kind, o.Treated.N), &o.Treated)
		fmt.Fprintln(w)
		writeTerms(w, fmt.Sprintf("outcome model, control arm (%s, n=%d)", o.Kind, o.Control.N), &o.Control)
	}
	for _, g := range []*fit.GLM{&m.Propensity} {
		for _, warn := range g.Warnings {
			fmt.Fprintf(w, "warning: %s\n", warn)
		}
	}
}

func writeQuantiles(w io.Writer, label string, qs []fit.Quantile) {
	if len(qs) == 0 {
		return
	}
	var b strings.Builder
	for _, q := range qs {
		fmt.Fprintf(&b, " q%g=%.4f", q.Q, q.Value)
	}
	fmt.Fprintf(w, "%-10s%s\n", label, b.String())
}

func writeTerms(w io.Writer, title string, g *fit.GLM) {
	fmt.Fprintln(w, title)
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "term\tcoef\tse\tz\t")
	for i, name := range g.Terms {
		se := g.SE[i]
		fmt.Fprintf(tw, "%s\t%.6g\t%.4g\t%.2f\t\n", name, g.Coef[i], se, g.Coef[i]/se)
	}
	tw.Flush()
}
