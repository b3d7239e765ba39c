// Package htmlreport renders a run's report as one self-contained HTML page
// — inline CSS and SVG charts, no scripts, no external assets — that opens
// from a file or an object store and prints on A4 or Letter, and renders
// the same charts as PNG files.
package htmlreport

import (
	"errors"
	"fmt"
	"io"

	"github.com/heft-project/heft/aggregate"
)

// Options are the words the page uses for the data; empty fields get
// neutral defaults.
type Options struct {
	Title           string // page title; default "heft report"
	OutcomeLabel    string // e.g. "next-winter gas use"; default "the outcome"
	Unit            string // e.g. "kWh"; default none
	TreatmentLabel  string // e.g. "the audit"; default "the treatment"
	PopulationLabel string // plural noun for the rows, e.g. "households"; default "rows"
	HeftVersion     string // default "unknown"
}

func (o Options) withDefaults() Options {
	def := func(s *string, d string) {
		if *s == "" {
			*s = d
		}
	}
	def(&o.Title, "heft report")
	def(&o.OutcomeLabel, "the outcome")
	def(&o.TreatmentLabel, "the treatment")
	def(&o.PopulationLabel, "rows")
	def(&o.HeftVersion, "unknown")
	return o
}

// Figure is one chart of the report.
type Figure struct {
	// Name is "balance", "overlap", "weights" or "drift": the chart's
	// element id is "chart-"+Name and its PNG file Name+".png".
	Name string
	c    *chart
}

// SVG returns the chart as an <svg> element for inlining in HTML.
func (f Figure) SVG() (string, error) { return f.c.svg() }

// WritePNG writes the chart as a PNG image at dpi dots per inch.
func (f Figure) WritePNG(w io.Writer, dpi int) error {
	if dpi <= 0 {
		return fmt.Errorf("%s chart: PNG resolution %d dpi; want a positive number", f.Name, dpi)
	}
	return f.c.writePNG(w, dpi)
}

// Figures returns the report's charts in page order.
func Figures(r *aggregate.Report) ([]Figure, error) {
	if r == nil {
		return nil, errors.New("htmlreport: no report")
	}
	return figuresOf(newFigures(r))
}

func figuresOf(f figures) ([]Figure, error) {
	ov, err := overlapChart(f.overlap)
	if err != nil {
		return nil, err
	}
	wt, err := weightsChart(f.weights)
	if err != nil {
		return nil, err
	}
	return []Figure{
		{"balance", balanceChart(f.balance, f.threshold)},
		{"overlap", ov},
		{"weights", wt},
		{"drift", driftChart(f.drift)},
	}, nil
}

// Render writes r as one self-contained HTML page.
func Render(w io.Writer, r *aggregate.Report, opt Options) error {
	if r == nil {
		return errors.New("htmlreport: no report")
	}
	opt = opt.withDefaults()
	f := newFigures(r)
	figs, err := figuresOf(f)
	if err != nil {
		return err
	}
	v := newView(r, f, opt)
	for _, fg := range figs {
		s, err := fg.SVG()
		if err != nil {
			return err
		}
		v.Charts[fg.Name] = s
	}
	return writePage(w, v)
}
