package main

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"path/filepath"

	"github.com/spf13/cobra"

	"github.com/heft-project/heft/aggregate"
	"github.com/heft-project/heft/aggregate/htmlreport"
	"github.com/heft-project/heft/pipeline"
)

// pngDPI renders the --png charts sharp on high-density screens and in
// slides (720 pt wide charts become 1440 px).
const pngDPI = 144

type reportFlags struct {
	out, pngDir                           string
	title, outcome, unit, treatment, rows string
}

func newReportCmd(env *Env) *cobra.Command {
	var f reportFlags
	cmd := &cobra.Command{
		Use:   "report -o REPORT.html [--png DIR] STATE_OR_REPORT.json",
		Short: "Render a state or report JSON as a self-contained HTML page with charts",
		Long: `Report renders the report of a run — from a state file ('heft score --state',
'heft merge -o') or a report JSON ('--report') — as one HTML file with inline
charts and no scripts or external files, to open from disk or an object
store and to print. --png also writes each chart as a PNG into DIR
(balance.png, overlap.png, weights.png, drift.png).

--outcome, --unit, --treatment and --population put the data's own words
into the plain-language lines, e.g. --treatment "the audit" --outcome
"next-winter gas use" --unit kWh --population households.`,
		Args: usageArgs(cobra.ExactArgs(1)),
		RunE: func(cmd *cobra.Command, args []string) error {
			if err := requireFlag("output", f.out); err != nil {
				return err
			}
			in := args[0]
			if pipeline.SameFile(in, f.out) {
				return usagef(fmt.Errorf("-o %s is the input; choose another output", f.out))
			}
			rep, err := loadReport(in)
			if err != nil {
				return modelError{err}
			}
			opt := htmlreport.Options{Title: f.title, OutcomeLabel: f.outcome, Unit: f.unit,
				TreatmentLabel: f.treatment, PopulationLabel: f.rows, HeftVersion: Version}
			if err := writeHTMLReport(f.out, rep, opt); err != nil {
				return outputError{err}
			}
			env.Logf("heft report: wrote %s", f.out)
			if f.pngDir != "" {
				names, err := writeChartPNGs(f.pngDir, rep)
				if err != nil {
					return outputError{err}
				}
				env.Logf("heft report: wrote %d charts to %s", len(names), f.pngDir)
			}
			return nil
		},
	}
	fl := cmd.Flags()
	fl.StringVarP(&f.out, "output", "o", "", "HTML file to write")
	fl.StringVar(&f.pngDir, "png", "", "also write each chart as a PNG into this directory")
	fl.StringVar(&f.title, "title", "", `page title (default "heft report")`)
	fl.StringVar(&f.outcome, "outcome", "", `the outcome in words (default "the outcome")`)
	fl.StringVar(&f.unit, "unit", "", "the outcome's unit, e.g. kWh")
	fl.StringVar(&f.treatment, "treatment", "", `the treatment in words (default "the treatment")`)
	fl.StringVar(&f.rows, "population", "", `plural noun for the rows, e.g. households (default "rows")`)
	return cmd
}

// loadReport reads a report JSON (it has "report_version") or else a state
// file, whose report it computes.
func loadReport(path string) (*aggregate.Report, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, err
	}
	var probe struct {
		ReportVersion *int   `json:"report_version"`
		Format        string `json:"format"`
	}
	if err := json.Unmarshal(data, &probe); err != nil {
		var te *json.UnmarshalTypeError
		if errors.As(err, &te) && te.Field == "" {
			err = fmt.Errorf("the top level is a JSON %s, not an object", te.Value)
		}
		return nil, fmt.Errorf("%s: not a heft state or report JSON: %w", path, err)
	}
	if probe.ReportVersion == nil {
		if probe.Format != aggregate.StateFormat {
			return nil, fmt.Errorf("%s: neither a report JSON (no \"report_version\") nor a state file (format %q); give the --report or --state file of 'heft score' or 'heft merge'", path, probe.Format)
		}
		s, err := aggregate.UnmarshalState(path, data)
		if err != nil {
			return nil, err
		}
		return s.Report(), nil
	}
	if v := *probe.ReportVersion; v < 1 || v > aggregate.ReportVersion {
		return nil, fmt.Errorf("%s: report_version %d; this heft reads versions 1 to %d", path, v, aggregate.ReportVersion)
	}
	var r aggregate.Report
	if err := json.Unmarshal(data, &r); err != nil {
		return nil, fmt.Errorf("%s: reading report: %w", path, err)
	}
	return &r, nil
}

func writeHTMLReport(path string, r *aggregate.Report, opt htmlreport.Options) error {
	var b bytes.Buffer
	if err := htmlreport.Render(&b, r, opt); err != nil {
		return fmt.Errorf("rendering %s: %w", path, err)
	}
	return writeFileAtomic(path, b.Bytes())
}

// writeChartPNGs writes one PNG per chart into dir, creating it.
func writeChartPNGs(dir string, r *aggregate.Report) ([]string, error) {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, pipeline.At(dir, fmt.Errorf("create PNG directory: %w", err))
	}
	figs, err := htmlreport.Figures(r)
	if err != nil {
		return nil, err
	}
	var names []string
	for _, fg := range figs {
		path := filepath.Join(dir, fg.Name+".png")
		var b bytes.Buffer
		if err := fg.WritePNG(&b, pngDPI); err != nil {
			return names, fmt.Errorf("rendering %s: %w", path, err)
		}
		if err := writeFileAtomic(path, b.Bytes()); err != nil {
			return names, err
		}
		names = append(names, path)
	}
	return names, nil
}

func writeFileAtomic(path string, data []byte) error {
	af, err := pipeline.CreateAtomic(path)
	if err != nil {
		return err
	}
	if _, err := af.Write(data); err != nil {
		return errors.Join(err, af.Abort())
	}
	return af.Commit()
}
