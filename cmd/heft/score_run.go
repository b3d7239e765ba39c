package main

import (
	"context"
	"fmt"
	"path/filepath"
	"strings"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/memory"

	"github.com/heft-project/heft/aggregate"
	"github.com/heft-project/heft/fit"
	"github.com/heft-project/heft/pipeline"
	"github.com/heft-project/heft/score"
)

// tableFormat is the output table's format.
type tableFormat int

const (
	formatParquet tableFormat = iota
	formatArrow
)

func (t tableFormat) ext() string {
	if t == formatArrow {
		return ".arrow"
	}
	return ".parquet"
}

func outputFormat(flag, out string, mode outputMode) (tableFormat, error) {
	switch strings.ToLower(flag) {
	case "parquet":
		if mode == outStdout {
			return 0, usagef(fmt.Errorf("-o - writes an Arrow IPC stream; --format parquet needs a file or directory"))
		}
		return formatParquet, nil
	case "arrow":
		return formatArrow, nil
	case "":
		if mode == outStdout {
			return formatArrow, nil
		}
		switch strings.ToLower(filepath.Ext(out)) {
		case ".arrow", ".feather", ".ipc", ".arrows":
			return formatArrow, nil
		}
		return formatParquet, nil
	}
	return 0, usagef(fmt.Errorf("--format must be parquet or arrow, not %q", flag))
}

// scoreRun holds what every input's scoring shares.
type scoreRun struct {
	env    *Env
	f      *scoreFlags
	m      *fit.Model
	scorer *score.Scorer
	mem    memory.Allocator
	format tableFormat
	prog   *progress
}

// one streams src through the model into target ("" = no table, "-" =
// Arrow stream on stdout), folding per-batch states into state. The target
// appears only if everything succeeded.
func (r *scoreRun) one(ctx context.Context, src pipeline.Source, in pipeline.Input, target string, state *aggregate.State, fold func(any) error) error {
	f := r.f
	schema := src.Schema()
	// The outcome is decoded when the table has it: a nightly table scored
	// before its outcomes arrive still gets weights, balance and overlap.
	withOutcome := r.m.Encoding.Outcome != nil && len(schema.FieldIndices(r.m.Encoding.Outcome.Column)) > 0
	if r.m.Encoding.Outcome != nil && !withOutcome {
		r.env.Logf("heft score: %s has no outcome column %q: weights and diagnostics only, no effect estimates", in.Path, r.m.Encoding.Outcome.Column)
	}
	enc, err := r.m.Encoding.Bind(schema, in.Path, withOutcome, f.unseen)
	if err != nil {
		return err
	}
	// Partition columns exist only in the folder names; the written file keeps
	// the file's own columns.
	keep := schema.NumFields()
	if ps, ok := src.(pipeline.PartitionedSource); ok {
		keep -= len(ps.PartitionColumns())
	}
	fileSchema := arrow.NewSchema(schema.Fields()[:keep], nil)
	var inMeta arrow.Metadata
	if ms, ok := src.(pipeline.MetadataSource); ok {
		inMeta = ms.Metadata()
	}
	meta := score.MergeMetadata(inMeta, score.Metadata(r.m, r.scorer.Policy(), f.cols, Version))
	outSchema, err := score.OutputSchema(fileSchema, f.cols, meta)
	if err != nil {
		return usagef(err)
	}
	var sink pipeline.Committer
	switch {
	case target == "":
		sink = discard{}
	case target == "-":
		sink, err = pipeline.NewArrowStreamSink(r.env.Stdout, outSchema, pipeline.ArrowSinkOptions{Alloc: r.mem, Metadata: meta})
	case r.format == formatArrow:
		sink, err = pipeline.NewArrowFileSink(target, outSchema, pipeline.ArrowSinkOptions{Alloc: r.mem, Metadata: meta})
	default:
		sink, err = pipeline.NewParquetSink(target, outSchema, pipeline.ParquetSinkOptions{
			Compression: f.compression, RowGroupRows: f.rowGroupRows, Metadata: meta,
			CreatedBy: "heft " + Version, Alloc: r.mem,
		})
	}
	if err != nil {
		return outputError{err}
	}
	var newAcc func() score.Accumulator
	if state != nil {
		newAcc = func() score.Accumulator { return state.Empty() }
	}
	newT := func() (pipeline.Transform, error) {
		return score.NewStage(enc, r.scorer, score.StageOptions{
			Alloc: r.mem, Columns: f.cols, OutputSchema: outSchema, Keep: keep, WriteTable: target != "",
			NewAccumulator: newAcc,
		}), nil
	}
	_, err = pipeline.Run(ctx, src, outputSink{sink}, newT, fold, pipeline.EngineOptions{Workers: f.workers, Progress: r.prog.Tracker()})
	if err != nil {
		sink.Abort()
		return err
	}
	if err := sink.Close(); err != nil {
		sink.Abort()
		return outputError{err}
	}
	if target != "" && target != "-" {
		r.env.Logf("heft score: wrote %s", target)
	}
	return nil
}

// discard is the sink of a --report-only run.
type discard struct{}

func (discard) Write(context.Context, arrow.RecordBatch) error { return nil }
func (discard) Close() error                                   { return nil }
func (discard) Abort() error                                   { return nil }

// outputSink marks the sink's write errors (a full disk) as output errors,
// so they get their exit code rather than the input's.
type outputSink struct{ pipeline.Committer }

func (s outputSink) Write(ctx context.Context, rec arrow.RecordBatch) error {
	if err := s.Committer.Write(ctx, rec); err != nil {
		if ctx.Err() != nil {
			return err
		}
		return outputError{err}
	}
	return nil
}
