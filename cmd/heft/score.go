package main

import (
	"context"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"runtime"
	"runtime/debug"
	"strings"
	"time"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/memory"
	"github.com/spf13/cobra"

	"github.com/heft-project/heft/aggregate"
	"github.com/heft-project/heft/fit"
	"github.com/heft-project/heft/pipeline"
	"github.com/heft-project/heft/score"
	"github.com/heft-project/heft/score/job"
)

type scoreFlags struct {
	job.Flags                             // shared with heft-beam
	model, out, format                    string
	workers                               int
	reportOnly                            bool
	compressionSet, rowGroupSet, batchSet bool
}

func newScoreCmd(env *Env) *cobra.Command {
	var f scoreFlags
	cmd := &cobra.Command{
		Use:   "score --model MODEL.json -o OUT [flags] INPUT...",
		Short: "Stream a table through the model, appending propensities and weights to every row",
		Long: `Score streams INPUT (Parquet files, directories with hive-style partitions,
globs, Arrow IPC files or streams, '-' for stdin) through the model and writes
every input column unchanged plus propensity, weight and in_support (and
mu0/mu1 with --predictions). OUT is a file, a directory (an existing one or a
path ending in '/': one output file per input, partition folders kept, and a
_SUCCESS marker written last), or '-' for an Arrow IPC stream on stdout.

Parquet to Parquet, the input's column chunks are copied as bytes and only
the model's columns decoded; --reencode (or --row-group-rows, or a
--compression other than the input's) decodes and re-encodes every column.

While it streams, mergeable accumulators compute effect estimates for every
estimand, standard errors, balance, overlap and drift: --report writes the
report, --state the partial state that 'heft merge' combines across
partitions. With a gate (--max-smd, --min-ess-share, --max-psi) heft exits
with code 7 after writing its outputs when the weights fail it.`,
		Args: usageArgs(cobra.MinimumNArgs(1)),
		RunE: func(cmd *cobra.Command, args []string) error {
			f.compressionSet = cmd.Flags().Changed("compression")
			f.rowGroupSet = cmd.Flags().Changed("row-group-rows")
			f.batchSet = cmd.Flags().Changed("batch-rows")
			return runScore(cmd.Context(), env, &f, args)
		},
	}
	fl := cmd.Flags()
	fl.StringVarP(&f.model, "model", "m", "", "model file from 'heft fit'")
	fl.StringVarP(&f.out, "output", "o", "", "output file, directory (ends in / or exists), or - for an Arrow stream on stdout")
	fl.StringVar(&f.format, "format", "", "parquet or arrow (default: from the output's extension; parquet for directories)")
	f.Flags.Define(fl)
	fl.IntVar(&f.workers, "workers", runtime.GOMAXPROCS(0), "scoring workers")
	fl.BoolVar(&f.reportOnly, "report-only", false, "compute the report without writing the table")
	return cmd
}

// outputMode is where the scored table goes.
type outputMode int

const (
	outNone   outputMode = iota // --report-only
	outFile                     // one file
	outDir                      // one file per input under a directory
	outStdout                   // Arrow IPC stream on stdout
)

// gcPercent is the collector's target during scoring unless GOGC says
// otherwise. Every batch's buffers become garbage once written, so the heap
// cycles between the live batches and up to (1 + GOGC/100) times them; at
// Go's default of 100 the peak grew with the length of the run (how high a
// cycle happened to climb), at 50 it stays within a few MiB from 1M to 10M
// rows for about 8% more CPU (DEVELOPERS.md, Benchmarks).
const gcPercent = 50

func runScore(ctx context.Context, env *Env, f *scoreFlags, args []string) error {
	start := time.Now()
	if os.Getenv("GOMEMLIMIT") == "" {
		// raised for wide reads once the columns read are known (job.Runner.Score)
		defer debug.SetMemoryLimit(debug.SetMemoryLimit(job.MemoryLimit))
	}
	if os.Getenv("GOGC") == "" {
		defer debug.SetGCPercent(debug.SetGCPercent(gcPercent))
	}
	if err := requireFlag("model", f.model); err != nil {
		return err
	}
	f.Policy.Estimand = strings.ToLower(f.Estimand)
	if err := f.Policy.Validate(); err != nil {
		return usagef(err)
	}
	if f.Unseen != fit.UnseenError && f.Unseen != fit.UnseenReference {
		return usagef(fmt.Errorf("--unseen must be error or reference, not %q", f.Unseen))
	}
	if f.workers < 1 || f.BatchRows < 1 || f.RowGroupRows < 1 {
		return usagef(errors.New("--workers, --batch-rows and --row-group-rows must be positive"))
	}
	mode := outFile
	switch {
	case f.reportOnly && f.out != "":
		return usagef(errors.New("--report-only writes no table: drop -o"))
	case f.reportOnly:
		mode = outNone
		if f.Report == "" && f.State == "" {
			env.Logf("heft score: --report-only without --report or --state: the summary goes to stderr only")
		}
	case f.out == "":
		return usagef(errors.New("-o is required (or --report-only)"))
	case f.out == "-":
		mode = outStdout
	case strings.HasSuffix(f.out, "/") || isDir(f.out):
		mode = outDir
	}
	if f.Report == "-" && mode == outStdout {
		return usagef(errors.New("--report - and -o - would both write to stdout"))
	}
	format, err := outputFormat(f.format, f.out, mode)
	if err != nil {
		return err
	}
	m, err := fit.Load(f.model)
	if err != nil {
		return modelError{err}
	}
	if f.Policy, err = f.Policy.Resolve(m); err != nil {
		return modelError{err}
	}
	if f.Columns.Predictions && m.Outcome == nil {
		return usagef(fmt.Errorf("--predictions needs outcome models; %s has none (fit with --outcome)", f.model))
	}
	ins, err := pipeline.Expand(args)
	if err != nil {
		return err
	}
	if mode == outFile && len(ins) > 1 {
		return usagef(fmt.Errorf("%d inputs need a directory output (end -o with /) or -o - for a stream", len(ins)))
	}
	if mode == outDir {
		seen := map[string]string{}
		var targets []string
		for _, in := range ins {
			if prev, ok := seen[in.Rel]; ok {
				return usagef(fmt.Errorf("%s and %s would both be written to %s in %s; pass their common parent directory instead", prev, in.Path, in.Rel, f.out))
			}
			seen[in.Rel] = in.Path
			targets = append(targets, pipeline.Target(f.out, in.Rel, format.Ext()))
		}
		if err := pipeline.RefuseInputTargets(targets, ins); err != nil {
			return usagef(err)
		}
	}
	if mode == outFile || mode == outDir {
		if err := refuseOverwrite(f.out, ins); err != nil {
			return err
		}
	}
	for _, p := range []string{f.State, f.Report} {
		if p != "" && p != "-" {
			if err := refuseOverwrite(p, ins); err != nil {
				return err
			}
		}
	}
	scorer, err := score.New(m, f.Policy)
	if err != nil {
		return modelError{err}
	}
	mem := memory.DefaultAllocator
	opt := pipeline.SourceOptions{Alloc: mem, BatchRows: f.BatchRows, PartitionColumns: true, Stdin: env.Stdin}

	// Check every input against the model before writing anything.
	var schema0 *arrow.Schema
	var path0 string
	var total int64
	for _, in := range ins {
		if in.Path == "-" {
			continue // a stream's schema is known only once it is read
		}
		src, err := pipeline.Open(ctx, in, opt)
		if err != nil {
			return err
		}
		s := src.Schema()
		src.Close()
		if err := m.CheckSchema(s, in.Path); err != nil {
			return err
		}
		if schema0 == nil {
			schema0, path0 = s, in.Path
		} else if mode == outDir {
			// Concat checks this for the other modes; the files of a
			// directory output share one state, so they must agree too.
			if err := pipeline.SameColumns(path0, schema0, in.Path, s); err != nil {
				return err
			}
		}
		if in.Format == pipeline.FormatParquet {
			if rgs, err := pipeline.RowGroups(in.Path); err == nil {
				for _, n := range rgs {
					total += n
				}
			}
		}
	}
	acfg := aggregate.Config{Model: m, Policy: f.Policy, By: f.ByColumns(), MinSegmentRows: f.MinSegmentRows, MaxSegments: f.MaxSegments, Gate: f.Gate}
	// The accumulators run when something asks for their results; a plain
	// scoring run only writes the table.
	accumulate := f.State != "" || f.Report != "" || f.reportOnly || f.By != "" ||
		f.Gate.MaxSMD > 0 || f.Gate.MinESSShare > 0 || f.Gate.MaxPSI > 0
	var state *aggregate.State
	prog := newProgress(env, total)
	run := job.New(m, scorer, job.Options{
		Columns: f.Columns, Unseen: f.Unseen, By: f.ByColumns(), Format: format,
		Splice:      !f.Reencode && format == job.Parquet && (mode == outFile || mode == outDir),
		Compression: f.Compression, CompressionSet: f.compressionSet,
		RowGroupRows: f.RowGroupRows, RowGroupSet: f.rowGroupSet,
		BatchRows: f.BatchRows, BatchSet: f.batchSet, Workers: f.workers,
		NeedOutcome: accumulate || f.Columns.Predictions, RaiseMemoryLimit: true,
		Version: Version, Alloc: mem, Logf: env.Logf, Stdout: env.Stdout, Progress: prog.Tracker,
	})
	newState := func(schema *arrow.Schema) error {
		if state != nil || !accumulate {
			return nil
		}
		s, err := aggregate.New(acfg, schema)
		if err != nil {
			return usagef(err)
		}
		state = s
		return nil
	}

	switch mode {
	case outDir:
		dir, err := pipeline.NewOutDir(f.out)
		if err != nil {
			return outputError{err}
		}
		for _, in := range ins {
			p, err := run.Open(ctx, in, opt, run.Plan(in, pipeline.RowGroupRange{}))
			if err != nil {
				return err
			}
			if err := newState(p.Src.Schema()); err != nil {
				p.Close()
				return err
			}
			target := dir.Path(in.Rel, format.Ext())
			if err := os.MkdirAll(filepath.Dir(target), 0o755); err != nil {
				p.Close()
				return outputError{err}
			}
			_, err = run.Score(ctx, p, in, target, state)
			p.Close()
			if err != nil {
				return err
			}
			logResources(env, in.Rel)
		}
		if err := dir.Success(); err != nil {
			return outputError{err}
		}
	case outFile:
		p, err := run.Open(ctx, ins[0], opt, run.Plan(ins[0], pipeline.RowGroupRange{}))
		if err != nil {
			return err
		}
		defer p.Close()
		if err := newState(p.Src.Schema()); err != nil {
			return err
		}
		if _, err := run.Score(ctx, p, ins[0], f.out, state); err != nil {
			return err
		}
	default:
		read := 0
		if schema0 != nil {
			read = schema0.NumFields()
			if mode == outNone {
				// No table is written: read what the model and the
				// accumulators use, and string covariates as dictionaries
				// when every input is Parquet (other formats give plain
				// strings, and the inputs must share one schema).
				opt.Columns = run.ModelColumns(schema0)
				if allParquet(ins) {
					opt.DictionaryColumns = run.LevelColumns(schema0)
				}
				read = len(opt.Columns)
			}
		}
		if read > 0 && !f.batchSet {
			opt.BatchRows = job.BatchRowsFor(read, f.BatchRows)
		}
		src, err := pipeline.Concat(ctx, ins, opt)
		if err != nil {
			return err
		}
		defer src.Close()
		if err := m.CheckSchema(src.Schema(), ins[0].Path); err != nil {
			return err
		}
		if err := newState(src.Schema()); err != nil {
			return err
		}
		target := f.out
		if mode == outStdout {
			target = job.Stdout
		} else if mode == outNone {
			target = ""
		}
		if _, err := run.Score(ctx, job.Part{Src: src, File: job.FileColumns(src)}, ins[0], target, state); err != nil {
			return err
		}
	}
	prog.Finish()
	if state == nil {
		env.Logf("heft score: no --report, --state or gate asked for: no estimates or diagnostics computed")
		return nil
	}
	state.Inputs = inputPaths(ins)
	state.RunSeconds = time.Since(start).Seconds()
	return finishReport(env, state, f.State, f.Report)
}

// allParquet reports whether every input is a Parquet file.
func allParquet(ins []pipeline.Input) bool {
	for _, in := range ins {
		if in.Format != pipeline.FormatParquet || in.Path == pipeline.Stdin {
			return false
		}
	}
	return true
}

// finishReport writes the state and report files, prints the summary, and
// turns a failed gate into its exit code (after everything was written).
func finishReport(env *Env, state *aggregate.State, statePath, reportPath string) error {
	if statePath != "" {
		if err := state.WriteFile(statePath); err != nil {
			return outputError{fmt.Errorf("writing the state: %w", err)}
		}
	}
	rep := state.Report()
	if reportPath != "" {
		if err := writeReportJSON(env, rep, reportPath); err != nil {
			return outputError{fmt.Errorf("writing the report: %w", err)}
		}
	}
	if !env.Quiet {
		if err := rep.WriteText(env.Stderr); err != nil {
			return err
		}
	}
	if rep.Failed() {
		return gateError{errors.New("the weights failed the gate (see the report's gate section); outputs were written")}
	}
	return nil
}

func writeReportJSON(env *Env, rep *aggregate.Report, path string) error {
	if path == "-" {
		return rep.WriteJSON(env.Stdout)
	}
	return rep.WriteFile(path)
}

func isDir(p string) bool {
	st, err := os.Stat(p)
	return err == nil && st.IsDir()
}
