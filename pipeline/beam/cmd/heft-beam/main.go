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
	"github.com/heft-project/heft/pipeline"
	"github.com/heft-project/heft/pipeline/beam/stage"
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

// options are the command line: heft score's shared flags (job.Flags),
// the launcher's own, and Beam's (defined by its packages on the same set).
type options struct {
	job.Flags
	model, out, format string
	workers            int
	partRows           int64
	quiet              bool
}

func define(fs *flag.FlagSet) *options {
	o := &options{}
	fs.StringVar(&o.model, "model", "", "model file from 'heft fit'")
	fs.StringVar(&o.model, "m", "", "short for --model")
	fs.StringVar(&o.out, "output", "", "output directory: one file per input file, or per range of a large file's row groups, and _SUCCESS last")
	fs.StringVar(&o.out, "o", "", "short for --output")
	fs.StringVar(&o.format, "format", "parquet", "parquet or arrow")
	o.Flags.Define(fs)
	fs.IntVar(&o.workers, "workers", 1, "scoring goroutines per part (the runner runs parts in parallel)")
	fs.Int64Var(&o.partRows, "part-rows", stage.DefaultPartRows, "rows per unit of work: larger Parquet files are split into ranges of row groups")
	fs.BoolVar(&o.quiet, "quiet", false, "no summary and only warnings from the runner on stderr")
	fs.BoolVar(&o.quiet, "q", false, "short for --quiet")
	return o
}

// config is the job the flags describe.
func (o *options) config(inputs []string, set map[string]bool) (stage.Config, error) {
	f := &o.Flags
	c := stage.Config{
		Settings: stage.Settings{
			ModelPath: o.model, Policy: f.Policy, Columns: f.Columns, Predictions: f.Columns.Predictions,
			Unseen: f.Unseen, By: splitList(f.By), MinSegmentRows: f.MinSegmentRows, MaxSegments: f.MaxSegments,
			Gate: f.Gate, Reencode: f.Reencode, Compression: f.Compression, CompressionSet: set["compression"],
			RowGroupRows: f.RowGroupRows, RowGroupSet: set["row-group-rows"], BatchRows: f.BatchRows,
			BatchSet: set["batch-rows"], Workers: o.workers, Version: job.Version,
		},
		Inputs: inputs, Out: o.out, StatePath: f.State, ReportPath: f.Report, PartRows: o.partRows,
	}
	c.Policy.Estimand = strings.ToLower(f.Estimand)
	switch {
	case len(inputs) == 0:
		return c, errors.New("no INPUT given (see --help)")
	case o.model == "":
		return c, errors.New("--model is required")
	case f.Report == "-":
		return c, errors.New("--report - is not available: the report is written by the job's last step, give a file")
	}
	switch strings.ToLower(o.format) {
	case "parquet":
		c.Format = job.Parquet
	case "arrow":
		c.Format = job.Arrow
	default:
		return c, fmt.Errorf("--format must be parquet or arrow, not %q", o.format)
	}
	return c, nil
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
	set := map[string]bool{}
	flag.Visit(func(f *flag.Flag) { set[f.Name] = true })
	c, err := o.config(flag.Args(), set)
	if err != nil {
		return fail(ExitUsage, err)
	}

	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	j, err := stage.Plan(ctx, c)
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
