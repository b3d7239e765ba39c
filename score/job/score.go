package job

import (
	"context"
	"os"
	"runtime/debug"

	"github.com/apache/arrow-go/v18/arrow"

	"github.com/heft-project/heft/aggregate"
	"github.com/heft-project/heft/pipeline"
	"github.com/heft-project/heft/score"
)

// Stdout is the target that writes an Arrow IPC stream to Options.Stdout.
const Stdout = "-"

// Score streams the part p of in through the model into target ("" = no
// table, Stdout = an Arrow stream), folding each batch's partial state into
// state (nil = no accumulators) in input order. The target appears only if
// everything succeeded: its sink commits atomically. It returns the number
// of rows scored.
func (r *Runner) Score(ctx context.Context, p Part, in pipeline.Input, target string, state *aggregate.State) (int64, error) {
	o := &r.opt
	src := p.Src
	schema := src.Schema()
	if o.RaiseMemoryLimit && os.Getenv("GOMEMLIMIT") == "" {
		// Batches hold the columns read, known here for every kind of
		// input, streams included: raise the limit to suit them, never
		// lower it.
		if lim := MemoryLimitFor(schema.NumFields()); lim > debug.SetMemoryLimit(-1) {
			debug.SetMemoryLimit(lim)
		}
	}
	withOutcome := r.withOutcome(schema)
	if oc := r.m.Encoding.Outcome; oc != nil && o.NeedOutcome && !withOutcome {
		r.logf("heft score: %s has no outcome column %q: weights and diagnostics only, no effect estimates", in.Path, oc.Column)
	}
	enc, err := r.m.Encoding.Bind(schema, in.Path, withOutcome, o.Unseen)
	if err != nil {
		return 0, err
	}
	sink, outSchema, err := r.sink(p, target)
	if err != nil {
		return 0, err
	}
	var newAcc func() score.Accumulator
	fold := func(any) error { return nil }
	if state != nil {
		newAcc = func() score.Accumulator { return state.Empty() }
		// Merging each batch's state in input order keeps the report
		// independent of the number of workers.
		fold = func(part any) error {
			if part == nil {
				return nil
			}
			return state.Merge(part.(*aggregate.State))
		}
	}
	keep := p.File.NumFields() // partition columns exist only in folder names
	newT := func() (pipeline.Transform, error) {
		return score.NewStage(enc, r.scorer, score.StageOptions{
			Alloc: o.Alloc, Columns: o.Columns, OutputSchema: outSchema, Keep: keep, WriteTable: target != "",
			AppendedOnly:   p.Plan != nil,
			NewAccumulator: newAcc,
		}), nil
	}
	var progress func(int64)
	if o.Progress != nil {
		progress = o.Progress()
	}
	rows, err := pipeline.Run(ctx, src, outputSink{sink}, newT, fold, pipeline.EngineOptions{Workers: o.Workers, Progress: progress})
	if err != nil {
		sink.Abort()
		return 0, err
	}
	if err := sink.Close(); err != nil {
		sink.Abort()
		return 0, output(err)
	}
	if target != "" && target != Stdout {
		r.logf("heft score: wrote %s", target)
	}
	return rows, nil
}

// sink opens the sink of p's output at target and returns it with the
// schema of the batches it takes: the file's columns and the appended ones,
// or the appended ones alone when p is spliced.
func (r *Runner) sink(p Part, target string) (pipeline.Committer, *arrow.Schema, error) {
	o := &r.opt
	var inMeta arrow.Metadata
	if ms, ok := p.Src.(pipeline.MetadataSource); ok {
		inMeta = ms.Metadata()
	}
	meta := score.MergeMetadata(inMeta, score.Metadata(r.m, r.scorer.Policy(), o.Columns, o.Version))
	file := p.File
	if p.Plan != nil && target != "" {
		file = arrow.NewSchema(nil, nil) // the sink takes the appended columns alone
	}
	outSchema, err := score.OutputSchema(file, o.Columns, meta)
	if err != nil {
		return nil, nil, usage(err)
	}
	var sink pipeline.Committer
	createdBy := "heft " + o.Version
	switch {
	case target == "":
		sink = discard{}
	case target == Stdout:
		sink, err = pipeline.NewArrowStreamSink(o.stdout(), outSchema, pipeline.ArrowSinkOptions{Alloc: o.Alloc, Metadata: meta})
	case o.Format == Arrow:
		sink, err = pipeline.NewArrowFileSink(target, outSchema, pipeline.ArrowSinkOptions{Alloc: o.Alloc, Metadata: meta})
	case p.Plan != nil:
		sink, err = pipeline.NewSpliceSink(target, p.Plan, outSchema, pipeline.SpliceOptions{
			Compression: r.spliceCodec(p.Plan), Metadata: meta, CreatedBy: createdBy, Alloc: o.Alloc,
		})
	default:
		sink, err = pipeline.NewParquetSink(target, outSchema, pipeline.ParquetSinkOptions{
			Compression: o.Compression, RowGroupRows: o.RowGroupRows, Metadata: meta,
			CreatedBy: createdBy, Alloc: o.Alloc,
		})
	}
	if err != nil {
		return nil, nil, output(err)
	}
	return sink, outSchema, nil
}

// discard is the sink of a report-only run.
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
		return output(err)
	}
	return nil
}
