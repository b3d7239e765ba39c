package score

import (
	"context"
	"fmt"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/memory"
	"github.com/heft-project/heft/fit"
	"github.com/heft-project/heft/pipeline"
)

// Accumulator is what the stage feeds each batch (the aggregate package
// implements it). b and s are the stage's reused buffers: Add must take what
// it needs before returning and keep no reference to them.
type Accumulator interface {
	Add(rec arrow.RecordBatch, b *fit.Batch, s *Scores) error
}

// BatchEncoder encodes a record batch into model terms; *fit.Encoder is one.
type BatchEncoder interface {
	Encode(rec arrow.RecordBatch, loc pipeline.Location, b *fit.Batch) error
}

// StageOptions configure a Stage.
type StageOptions struct {
	Alloc        memory.Allocator // nil = memory.DefaultAllocator
	Columns      Columns
	OutputSchema *arrow.Schema // from OutputSchema; required with WriteTable
	Keep         int           // input columns to keep (drops trailing partition columns); 0 = all
	WriteTable   bool          // false for a report-only run: Apply returns out = nil
	// AppendedOnly makes out the appended columns alone (OutputSchema then
	// describes only them), for a sink that copies the input's columns.
	AppendedOnly bool
	// NewAccumulator, when not nil, is called once per batch; the returned
	// value, after Add, is Apply's partial, so the engine can fold partials
	// in input order and reports do not depend on the number of workers.
	NewAccumulator func() Accumulator
}

// Stage is the score step of the streaming engine: Encode → Score →
// accumulate → Append. It implements pipeline.Transform. A Stage owns its
// Batch and Scores buffers, so each worker needs its own.
type Stage struct {
	enc    BatchEncoder
	sc     *Scorer
	opt    StageOptions
	batch  fit.Batch
	scores Scores
}

var _ pipeline.Transform = (*Stage)(nil)

// NewStage returns a Stage encoding with enc and scoring with sc. An
// encoder with scratch buffers (*fit.Encoder) is cloned, so Stages made
// from one encoder can run on different workers.
func NewStage(enc BatchEncoder, sc *Scorer, opt StageOptions) *Stage {
	if c, ok := enc.(interface{ Clone() *fit.Encoder }); ok {
		enc = c.Clone()
	}
	if opt.Alloc == nil {
		opt.Alloc = memory.DefaultAllocator
	}
	return &Stage{enc: enc, sc: sc, opt: opt}
}

// Apply scores one batch. out is the input with the appended columns (nil
// unless WriteTable) and partial the batch's Accumulator (nil without
// NewAccumulator). rec is not released.
func (s *Stage) Apply(ctx context.Context, rec arrow.RecordBatch, loc pipeline.Location) (arrow.RecordBatch, any, error) {
	if err := ctx.Err(); err != nil {
		return nil, nil, err
	}
	if err := s.enc.Encode(rec, loc, &s.batch); err != nil {
		return nil, nil, err
	}
	if s.batch.N != int(rec.NumRows()) {
		return nil, nil, &pipeline.Error{File: loc.File, RowGroup: loc.RowGroup, Row: loc.Row,
			Err: fmt.Errorf("encoder returned %d rows for a batch of %d", s.batch.N, rec.NumRows())}
	}
	if err := s.sc.Score(&s.batch, loc, &s.scores); err != nil {
		return nil, nil, err
	}
	var partial any
	if s.opt.NewAccumulator != nil {
		acc := s.opt.NewAccumulator()
		if err := acc.Add(rec, &s.batch, &s.scores); err != nil {
			return nil, nil, err
		}
		partial = acc
	}
	if !s.opt.WriteTable {
		return nil, partial, nil
	}
	if s.opt.Columns.Predictions && !s.sc.HasOutcome() {
		return nil, nil, pipeline.At(loc.File, fmt.Errorf("--predictions: the model has no outcome models"))
	}
	if s.opt.AppendedOnly {
		if s.opt.OutputSchema == nil || s.opt.OutputSchema.NumFields() != len(s.opt.Columns.appended()) {
			return nil, nil, pipeline.At(loc.File, fmt.Errorf("score stage: the output schema is not the appended columns"))
		}
		return Appended(s.opt.Alloc, s.opt.OutputSchema, &s.scores, s.opt.Columns), partial, nil
	}
	keep := s.opt.Keep
	if keep <= 0 {
		keep = int(rec.NumCols())
	}
	if err := s.checkSchema(rec, keep, loc); err != nil {
		return nil, nil, err
	}
	out := Append(s.opt.Alloc, s.opt.OutputSchema, rec, keep, &s.scores, s.opt.Columns)
	return out, partial, nil
}

// checkSchema compares the kept input columns with the output schema, so a
// file whose columns differ from the first file's is an error naming it
// rather than a panic inside Arrow.
func (s *Stage) checkSchema(rec arrow.RecordBatch, keep int, loc pipeline.Location) error {
	out := s.opt.OutputSchema
	at := func(col string, err error) error {
		return &pipeline.Error{File: loc.File, RowGroup: loc.RowGroup, Row: -1, Column: col, Err: err}
	}
	if out == nil {
		return at("", fmt.Errorf("score stage: no output schema"))
	}
	if keep > int(rec.NumCols()) {
		return at("", fmt.Errorf("batch has %d columns, fewer than the %d to keep", rec.NumCols(), keep))
	}
	extra := len(s.opt.Columns.appended())
	if out.NumFields() != keep+extra {
		return at("", fmt.Errorf("output schema has %d fields, want %d kept input columns plus %d appended", out.NumFields(), keep, extra))
	}
	in := rec.Schema()
	for i := 0; i < keep; i++ {
		f, g := in.Field(i), out.Field(i)
		if f.Name != g.Name || !arrow.TypeEqual(f.Type, g.Type) {
			return at(f.Name, fmt.Errorf("column %d is %s %s here but %s %s in the output schema (inputs must share one schema)", i, f.Name, f.Type, g.Name, g.Type))
		}
	}
	return nil
}
