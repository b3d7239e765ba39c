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

// Exit codes are heft score's, and ExitJob (see stage.ExitOK and below).
const (
	ExitOK          = stage.ExitOK
	ExitUsage       = stage.ExitUsage
	ExitInput       = stage.ExitInput
	ExitModel       = stage.ExitModel
	ExitOutput      = stage.ExitOutput
	ExitGate        = stage.ExitGate
	ExitJob         = stage.ExitJob
	ExitInterrupted = stage.ExitInterrupted
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
			Unseen: f.Unseen, By: f.ByColumns(), MinSegmentRows: f.MinSegmentRows, MaxSegments: f.MaxSegments,
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
	inputs, err := parse(flag.CommandLine, args)
	if err != nil {
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
	c, err := o.config(inputs, set)
	if err != nil {
		return fail(ExitUsage, err)
	}

	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	j, err := stage.Plan(ctx, c)
	if err != nil {
		if ctx.Err() != nil {
			return fail(ExitInterrupted, err)
		}
		return fail(stage.ExitCode(err), err)
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
		if msg, code, ok := stage.Failure(err); ok {
			return fail(code, fmt.Errorf("the job failed; no %s was written: %s", pipeline.SuccessMarker, msg))
		}
		return fail(ExitJob, fmt.Errorf("the job failed; no %s was written: %w", pipeline.SuccessMarker, err))
	}
	return summary(c.ReportPath, c.StatePath, o.quiet, stderr)
}

// summary prints the report's summary and turns a failed gate into its
// exit code, as heft score does: from the report the job wrote, or from
// its state when it wrote only that.
func summary(reportPath, statePath string, quiet bool, stderr io.Writer) int {
	var rep *aggregate.Report
	switch {
	case reportPath != "":
		b, err := os.ReadFile(reportPath)
		if err == nil {
			rep = new(aggregate.Report)
			err = json.Unmarshal(b, rep)
		}
		if err != nil {
			fmt.Fprintf(stderr, "heft-beam: reading the report the job wrote: %v\n", err)
			return ExitOutput
		}
	case statePath != "":
		s, err := aggregate.ReadState(statePath)
		if err != nil {
			fmt.Fprintf(stderr, "heft-beam: reading the state the job wrote: %v\n", err)
			return ExitOutput
		}
		rep = s.Report()
	default:
		return ExitOK
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

// parse parses args with fs, taking flags before and after the inputs
// alike (as heft score does), and returns the inputs. "--" ends the flags.
func parse(fs *flag.FlagSet, args []string) ([]string, error) {
	var inputs []string
	for {
		if err := fs.Parse(args); err != nil {
			return nil, err
		}
		rest := fs.Args()
		if len(rest) == 0 {
			return inputs, nil
		}
		if len(args) > len(rest) && args[len(args)-len(rest)-1] == "--" {
			return append(inputs, rest...), nil
		}
		inputs, args = append(inputs, rest[0]), rest[1:]
	}
}
