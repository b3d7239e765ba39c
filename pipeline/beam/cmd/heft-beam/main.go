// Command heft-beam runs heft's score stage as an Apache Beam job: the same
// model file, inputs and outputs as heft score, its work spread over a
// runner's workers (the local Prism runner by default; Flink, Spark or
// Dataflow with Beam's own --runner and --endpoint flags).
//
//	heft-beam --model model.json -o scored/ --report report.json data/
//
// It is its own binary, not a heft subcommand, because Beam registers its
// flags on the standard flag set and takes over a binary started as a
// worker (beam.Init), and so that heft itself does not link Beam.
package main

import (
	"context"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"os"
	"os/signal"
	"strings"
	"syscall"

	"github.com/apache/beam/sdks/v2/go/pkg/beam"
	"github.com/apache/beam/sdks/v2/go/pkg/beam/x/beamx"

	"github.com/heft-project/heft/aggregate"
	"github.com/heft-project/heft/fit"
	"github.com/heft-project/heft/pipeline"
	"github.com/heft-project/heft/pipeline/beam/stage"
	"github.com/heft-project/heft/score"
	"github.com/heft-project/heft/score/job"
)

// Exit codes: heft score's (README.md, "Exit codes"), and ExitJob for a job
// the runner reports failed.
const (
	ExitOK          = 0
	ExitInternal    = 1
	ExitUsage       = 2
	ExitInput       = 3
	ExitModel       = 4
	ExitOutput      = 6
	ExitGate        = 7
	ExitJob         = 8 // the runner reported the job failed; its message carries the worker's error
	ExitInterrupted = 130
)

func main() { os.Exit(run(os.Args[1:], os.Stderr)) }

// options are the command line beyond stage.Config.
type options struct {
	cfg      stage.Config
	format   string
	estimand string
	by       string
	quiet    bool
}

func define(fs *flag.FlagSet) *options {
	o := &options{cfg: stage.Config{Settings: stage.Settings{Columns: score.DefaultColumns(), Version: job.Version}}}
	c, s := &o.cfg, &o.cfg.Settings
	fs.StringVar(&s.ModelPath, "model", "", "model file from 'heft fit'")
	fs.StringVar(&s.ModelPath, "m", "", "short for --model")
	fs.StringVar(&c.Out, "output", "", "output directory: one file per input file, or per range of a large file's row groups, and _SUCCESS last")
	fs.StringVar(&c.Out, "o", "", "short for --output")
	fs.StringVar(&o.format, "format", "parquet", "parquet or arrow")
	fs.StringVar(&o.estimand, "estimand", score.ATE, "weights for: ate, att, atc or overlap")
	fs.BoolVar(&s.Policy.Stabilize, "stabilize", false, "multiply weights by the marginal share of the row's arm at fit")
	fs.Float64Var(&s.Policy.Clip, "clip", 0, "bound propensities to [ε, 1−ε]")
	fs.Float64Var(&s.Policy.Trim, "trim", 0, "zero the weight where e is outside [α, 1−α]")
	fs.Float64Var(&s.Policy.TruncateQ, "truncate-quantile", 0, "cap weights at the fit sample's q-th weight quantile")
	fs.StringVar(&s.Unseen, "unseen", fit.UnseenError, "categorical levels not seen at fit: error, or reference")
	fs.BoolVar(&s.Predictions, "predictions", false, "also write the outcome models' predictions mu0 and mu1")
	fs.StringVar(&s.Columns.Propensity, "propensity-column", s.Columns.Propensity, "name of the appended propensity column")
	fs.StringVar(&s.Columns.Weight, "weight-column", s.Columns.Weight, "name of the appended weight column")
	fs.StringVar(&s.Columns.InSupport, "in-support-column", s.Columns.InSupport, "name of the appended in-support column")
	fs.StringVar(&s.Columns.Mu0, "mu0-column", s.Columns.Mu0, "name of the appended control-outcome prediction")
	fs.StringVar(&s.Columns.Mu1, "mu1-column", s.Columns.Mu1, "name of the appended treated-outcome prediction")
	fs.StringVar(&s.Compression, "compression", "snappy", "Parquet compression: snappy, zstd or none (spliced files keep the input's codec unless this is given)")
	fs.Int64Var(&s.RowGroupRows, "row-group-rows", 131072, "rows per Parquet row group in the output (re-encodes every column)")
	fs.BoolVar(&s.Reencode, "reencode", false, "decode and re-encode every column rather than copy the input's column chunks")
	fs.IntVar(&s.BatchRows, "batch-rows", 65536, "rows per batch in flight")
	fs.IntVar(&s.Workers, "workers", 1, "scoring goroutines per part (the runner runs parts in parallel)")
	fs.StringVar(&c.StatePath, "state", "", "write the merged accumulator state here")
	fs.StringVar(&c.ReportPath, "report", "", "write the report JSON here")
	fs.StringVar(&o.by, "by", "", "segment columns: estimates and balance per segment")
	fs.IntVar(&s.MinSegmentRows, "min-segment-rows", 100, "suppress segments with fewer rows than this in either arm")
	fs.IntVar(&s.MaxSegments, "max-segments", 1000, "fail when there are more segments than this")
	fs.Float64Var(&s.Gate.MaxSMD, "max-smd", 0, "gate: fail when any term's weighted |SMD| exceeds this")
	fs.Float64Var(&s.Gate.MinESSShare, "min-ess-share", 0, "gate: fail when an arm's effective sample size is below this share of its rows")
	fs.Float64Var(&s.Gate.MaxPSI, "max-psi", 0, "gate: fail when the propensity drift index since the fit exceeds this")
	fs.Int64Var(&c.PartRows, "part-rows", stage.DefaultPartRows, "rows per unit of work: larger Parquet files are split into ranges of row groups")
	fs.BoolVar(&o.quiet, "quiet", false, "no summary and only warnings from the runner on stderr")
	fs.BoolVar(&o.quiet, "q", false, "short for --quiet")
	return o
}

func run(args []string, stderr io.Writer) int {
	o := define(flag.CommandLine)
	flag.CommandLine.SetOutput(stderr)
	flag.Usage = func() {
		fmt.Fprintf(stderr, "Usage: heft-beam --model MODEL.json -o OUTDIR/ [flags] INPUT...\n\n"+
			"Scores INPUT (Parquet or Arrow files, directories with hive-style partitions, globs)\n"+
			"as an Apache Beam job, with heft score's outputs. Beam's own flags (--runner,\n"+
			"--endpoint, --environment_type, --worker_binary, ...) are listed with the others.\n\n")
		flag.PrintDefaults()
	}
	if err := flag.CommandLine.Parse(args); err != nil {
		return ExitUsage
	}
	// A binary a runner started as a worker does its work in Init and exits.
	beam.Init()
	if o.quiet {
		// The runner's and the SDK's log lines go through slog's default,
		// which Init set up.
		slog.SetDefault(slog.New(slog.NewTextHandler(stderr, &slog.HandlerOptions{Level: slog.LevelWarn})))
	}

	fail := func(code int, err error) int {
		fmt.Fprintf(stderr, "heft-beam: %v\n", err)
		return code
	}
	c := &o.cfg
	c.Inputs = flag.Args()
	if len(c.Inputs) == 0 {
		return fail(ExitUsage, errors.New("no INPUT given (see --help)"))
	}
	if c.Settings.ModelPath == "" {
		return fail(ExitUsage, errors.New("--model is required"))
	}
	switch o.format {
	case "parquet":
		c.Format = job.Parquet
	case "arrow":
		c.Format = job.Arrow
	default:
		return fail(ExitUsage, fmt.Errorf("--format must be parquet or arrow, not %q", o.format))
	}
	set := map[string]bool{}
	flag.Visit(func(f *flag.Flag) { set[f.Name] = true })
	c.CompressionSet, c.RowGroupSet, c.BatchSet = set["compression"], set["row-group-rows"], set["batch-rows"]
	c.Policy.Estimand = o.estimand
	c.By = splitList(o.by)

	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	j, err := stage.Plan(ctx, *c)
	if err != nil {
		return fail(exitCode(ctx, err), err)
	}
	p, s := beam.NewPipelineWithRoot()
	j.Build(s)
	if err := beamx.Run(ctx, p); err != nil {
		if ctx.Err() != nil {
			return fail(ExitInterrupted, err)
		}
		if !o.quiet {
			fmt.Fprintf(stderr, "heft-beam: the runner's report:\n%v\n", err)
		}
		msg := stage.HeftError(err)
		if msg == "" {
			msg = err.Error()
		}
		return fail(ExitJob, fmt.Errorf("the job failed; no %s was written: %s", pipeline.SuccessMarker, msg))
	}
	return summary(c.ReportPath, o.quiet, stderr)
}

// summary prints the report's summary and turns a failed gate into its
// exit code, as heft score does.
func summary(reportPath string, quiet bool, stderr io.Writer) int {
	if reportPath == "" {
		return ExitOK
	}
	b, err := os.ReadFile(reportPath)
	if err != nil {
		fmt.Fprintf(stderr, "heft-beam: reading the report the job wrote: %v\n", err)
		return ExitOutput
	}
	var rep aggregate.Report
	if err := json.Unmarshal(b, &rep); err != nil {
		fmt.Fprintf(stderr, "heft-beam: %s: %v\n", reportPath, err)
		return ExitOutput
	}
	if !quiet {
		rep.WriteText(stderr)
	}
	if rep.Failed() {
		fmt.Fprintln(stderr, "heft-beam: the weights failed the gate (see the report's gate section); outputs were written")
		return ExitGate
	}
	return ExitOK
}

// exitCode maps a launch error to its exit code, as heft score's does.
func exitCode(ctx context.Context, err error) int {
	var (
		je *job.Error
		pe *pipeline.Error
	)
	switch {
	case ctx.Err() != nil || errors.Is(err, context.Canceled):
		return ExitInterrupted
	case errors.As(err, &je):
		switch je.Kind {
		case job.KindUsage:
			return ExitUsage
		case job.KindModel:
			return ExitModel
		case job.KindOutput:
			return ExitOutput
		}
	case errors.As(err, &pe):
		return ExitInput
	}
	return ExitInput
}

func splitList(s string) []string {
	var out []string
	for _, f := range strings.Split(s, ",") {
		if f = strings.TrimSpace(f); f != "" {
			out = append(out, f)
		}
	}
	return out
}
