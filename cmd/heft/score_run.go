package main

import (
	"context"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"runtime/debug"
	"slices"
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
	// needOutcome: the accumulators or --predictions use the outcome, so it
	// is read when the table has it.
	needOutcome bool
	// splice: Parquet output may copy the input's column chunks (see
	// splicePlan); toldWhy: a reason it may not that holds for every input
	// was logged.
	splice  bool
	toldWhy bool
}

// input is one opened input.
type input struct {
	src pipeline.Source
	// file is the file's own columns, written to the output; the source may
	// read fewer (splicing) or add partition columns.
	file *arrow.Schema
	// plan is the file's layout when its columns are spliced rather than
	// re-encoded; nil to re-encode.
	plan *pipeline.SplicePlan
}

// open opens in for scoring. With a splice plan (see splicePlan) only the
// model's columns are read.
func (r *scoreRun) open(ctx context.Context, in pipeline.Input, opt pipeline.SourceOptions, plan *pipeline.SplicePlan) (input, error) {
	src, err := pipeline.Open(ctx, in, opt)
	if err != nil {
		return input{}, err
	}
	schema := src.Schema()
	file := fileColumns(src)
	read := schema.NumFields()
	reopen := plan != nil // for the model's columns alone
	if plan != nil {
		opt.Columns = r.modelColumns(schema)
		opt.DictionaryColumns = r.levelColumns(schema)
		read = len(opt.Columns)
	}
	if b := batchRowsFor(read, r.f.batchRows); !r.f.batchSet && b != opt.BatchRows && reopenable(in) {
		opt.BatchRows, reopen = b, true // for batches sized by the width read
	}
	if !reopen {
		return input{src: src, file: file}, nil
	}
	src.Close()
	if src, err = pipeline.Open(ctx, in, opt); err != nil {
		return input{}, err
	}
	return input{src: src, file: file, plan: plan}, nil
}

// fileColumns is the schema of src's file's own columns: src's without the
// partition columns it appends, which exist only in folder names.
func fileColumns(src pipeline.Source) *arrow.Schema {
	fields := src.Schema().Fields()
	if ps, ok := src.(pipeline.PartitionedSource); ok {
		fields = fields[:len(fields)-len(ps.PartitionColumns())]
	}
	return arrow.NewSchema(fields, nil)
}

// reopenable reports whether in can be opened a second time: a regular
// file, not stdin or a pipe, whose schema a first open has consumed.
func reopenable(in pipeline.Input) bool {
	if in.Path == pipeline.Stdin {
		return false
	}
	st, err := os.Stat(in.Path)
	return err == nil && st.Mode().IsRegular()
}

// modelColumns names the columns scoring reads from a table of schema: the
// covariates, the treatment, the outcome when it is used and present, and
// the --by columns the table has (a --by name it lacks is left for the
// accumulators to report as the usage error it is).
func (r *scoreRun) modelColumns(schema *arrow.Schema) []string {
	e := &r.m.Encoding
	cols := []string{e.Treatment.Column}
	for _, c := range e.Columns {
		cols = append(cols, c.Name)
	}
	if r.withOutcome(schema) {
		cols = append(cols, e.Outcome.Column)
	}
	for _, b := range splitList(r.f.by) {
		if len(schema.FieldIndices(b)) > 0 {
			cols = append(cols, b)
		}
	}
	seen := map[string]bool{}
	out := cols[:0]
	for _, c := range cols {
		if !seen[c] {
			seen[c] = true
			out = append(out, c)
		}
	}
	return out
}

// levelColumns names the string covariates that only the encoder reads
// (not the treatment, the outcome or a --by column): read as dictionaries,
// each page's levels are looked up once instead of once per row. Their
// output bytes are copied, so the type they are read as is not written.
func (r *scoreRun) levelColumns(schema *arrow.Schema) []string {
	e := &r.m.Encoding
	other := append([]string{e.Treatment.Column}, splitList(r.f.by)...)
	if e.Outcome != nil {
		other = append(other, e.Outcome.Column)
	}
	var out []string
	for _, c := range e.Columns {
		if c.Kind != fit.KindCategorical || slices.Contains(other, c.Name) {
			continue
		}
		if i := schema.FieldIndices(c.Name); len(i) == 1 && schema.Field(i[0]).Type.ID() == arrow.STRING {
			out = append(out, c.Name)
		}
	}
	return out
}

// withOutcome: the outcome is decoded when something uses it and the table
// has it: a nightly table scored before its outcomes arrive still gets
// weights, balance and overlap.
func (r *scoreRun) withOutcome(schema *arrow.Schema) bool {
	o := r.m.Encoding.Outcome
	return r.needOutcome && o != nil && len(schema.FieldIndices(o.Column)) > 0
}

// splicePlan returns in's layout when its scored Parquet output can copy
// its column chunks as bytes rather than decode and re-encode every column
// (the default whenever it applies), else nil, logging why when the reason
// is not plain: --reencode, a non-Parquet input or output.
func (r *scoreRun) splicePlan(in pipeline.Input) *pipeline.SplicePlan {
	f := r.f
	if !r.splice || in.Format != pipeline.FormatParquet || in.Path == pipeline.Stdin {
		return nil
	}
	// A reason that holds for every input (a flag) is told once; one about
	// a file, for each file.
	why := func(once bool, format string, args ...any) *pipeline.SplicePlan {
		if !once || !r.toldWhy {
			r.toldWhy = r.toldWhy || once
			r.env.Logf("heft score: re-encoding every column: "+format, args...)
		}
		return nil
	}
	if f.rowGroupSet {
		return why(true, "--row-group-rows sets new row groups (copying column chunks keeps the input's)")
	}
	plan, err := pipeline.PlanSplice(in.Path)
	var ns *pipeline.NoSpliceError
	switch {
	case errors.As(err, &ns):
		return why(false, "%s", ns.Error())
	case err != nil:
		return nil // the general path reports what is wrong with the file
	}
	if c := plan.Compression(); f.compressionSet && c != codecName(f.compression) {
		if c == "" {
			c = "mixed or other codecs"
		}
		return why(false, "%s: its column chunks are %s, --compression asks for %s", in.Path, c, f.compression)
	}
	return plan
}

// codecName is a --compression value in the spelling SplicePlan.Compression
// uses.
func codecName(flag string) string {
	c := strings.ToLower(flag)
	if c == "uncompressed" {
		return "none"
	}
	return c
}

// spliceCodec is the appended columns' codec: --compression when given,
// else the input's when all its chunks share one we write, else snappy.
func (r *scoreRun) spliceCodec(plan *pipeline.SplicePlan) string {
	if r.f.compressionSet {
		return r.f.compression
	}
	if c := plan.Compression(); c != "" {
		return c
	}
	return "snappy"
}

// one streams in through the model into target ("" = no table, "-" =
// Arrow stream on stdout), folding per-batch states into state. The target
// appears only if everything succeeded.
func (r *scoreRun) one(ctx context.Context, op input, in pipeline.Input, target string, state *aggregate.State, fold func(any) error) error {
	f := r.f
	src := op.src
	schema := src.Schema()
	if os.Getenv("GOMEMLIMIT") == "" {
		// Batches hold the columns read, known here for every kind of
		// input, streams included: raise the limit to suit them, never
		// lower it. runScore restores the caller's.
		if lim := scoreMemoryLimit(schema.NumFields()); lim > debug.SetMemoryLimit(-1) {
			debug.SetMemoryLimit(lim)
		}
	}
	withOutcome := r.withOutcome(schema)
	if o := r.m.Encoding.Outcome; o != nil && r.needOutcome && !withOutcome {
		r.env.Logf("heft score: %s has no outcome column %q: weights and diagnostics only, no effect estimates", in.Path, o.Column)
	}
	enc, err := r.m.Encoding.Bind(schema, in.Path, withOutcome, f.unseen)
	if err != nil {
		return err
	}
	// Partition columns exist only in the folder names; the written file keeps
	// the file's own columns.
	keep := op.file.NumFields()
	var inMeta arrow.Metadata
	if ms, ok := src.(pipeline.MetadataSource); ok {
		inMeta = ms.Metadata()
	}
	meta := score.MergeMetadata(inMeta, score.Metadata(r.m, r.scorer.Policy(), f.cols, Version))
	outSchema, err := score.OutputSchema(op.file, f.cols, meta)
	if err != nil {
		return usagef(err)
	}
	if op.plan != nil && target != "" {
		// The sink takes the appended columns alone.
		if outSchema, err = score.OutputSchema(arrow.NewSchema(nil, nil), f.cols, meta); err != nil {
			return usagef(err)
		}
	}
	var sink pipeline.Committer
	switch {
	case target == "":
		sink = discard{}
	case target == "-":
		sink, err = pipeline.NewArrowStreamSink(r.env.Stdout, outSchema, pipeline.ArrowSinkOptions{Alloc: r.mem, Metadata: meta})
	case r.format == formatArrow:
		sink, err = pipeline.NewArrowFileSink(target, outSchema, pipeline.ArrowSinkOptions{Alloc: r.mem, Metadata: meta})
	case op.plan != nil:
		sink, err = pipeline.NewSpliceSink(target, op.plan, outSchema, pipeline.SpliceOptions{
			Compression: r.spliceCodec(op.plan), Metadata: meta, CreatedBy: "heft " + Version, Alloc: r.mem,
		})
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
			AppendedOnly:   op.plan != nil,
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
