package job

import (
	"context"
	"errors"
	"os"
	"slices"
	"strings"

	"github.com/apache/arrow-go/v18/arrow"

	"github.com/heft-project/heft/fit"
	"github.com/heft-project/heft/pipeline"
)

// Part is one opened part of a table.
type Part struct {
	Src pipeline.Source
	// File is the file's own columns, written to the output; Src may read
	// fewer (splicing) or add partition columns.
	File *arrow.Schema
	// Plan is the file's layout when its columns are spliced rather than
	// re-encoded; nil to re-encode.
	Plan *pipeline.SplicePlan
}

// Close closes the part's source.
func (p Part) Close() error { return p.Src.Close() }

// Open opens the part of in that opt selects (opt.RowGroups) for scoring.
// With a splice plan (see Plan, for the same row groups) only the model's
// columns are read.
func (r *Runner) Open(ctx context.Context, in pipeline.Input, opt pipeline.SourceOptions, plan *pipeline.SplicePlan) (Part, error) {
	src, err := pipeline.Open(ctx, in, opt)
	if err != nil {
		return Part{}, err
	}
	schema := src.Schema()
	file := FileColumns(src)
	read := schema.NumFields()
	reopen := plan != nil // for the model's columns alone
	if plan != nil {
		opt.Columns = r.ModelColumns(schema)
		opt.DictionaryColumns = r.LevelColumns(schema)
		read = len(opt.Columns)
	}
	if b := BatchRowsFor(read, r.opt.BatchRows); !r.opt.BatchSet && b != opt.BatchRows && reopenable(in) {
		opt.BatchRows, reopen = b, true // for batches sized by the width read
	}
	if !reopen {
		return Part{Src: src, File: file}, nil
	}
	src.Close()
	if src, err = pipeline.Open(ctx, in, opt); err != nil {
		return Part{}, err
	}
	return Part{Src: src, File: file, Plan: plan}, nil
}

// FileColumns is the schema of src's file's own columns: src's without the
// partition columns it appends, which exist only in folder names.
func FileColumns(src pipeline.Source) *arrow.Schema {
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

// ModelColumns names the columns scoring reads from a table of schema: the
// covariates, the treatment, the outcome when it is used and present, and
// the By columns the table has (a By name it lacks is left for the
// accumulators to report as the usage error it is).
func (r *Runner) ModelColumns(schema *arrow.Schema) []string {
	e := &r.m.Encoding
	cols := []string{e.Treatment.Column}
	for _, c := range e.Columns {
		cols = append(cols, c.Name)
	}
	if r.withOutcome(schema) {
		cols = append(cols, e.Outcome.Column)
	}
	for _, b := range r.opt.By {
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

// LevelColumns names the string covariates that only the encoder reads
// (not the treatment, the outcome or a By column): read as dictionaries,
// each page's levels are looked up once instead of once per row. Their
// output bytes are copied, so the type they are read as is not written.
func (r *Runner) LevelColumns(schema *arrow.Schema) []string {
	e := &r.m.Encoding
	other := append([]string{e.Treatment.Column}, r.opt.By...)
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
func (r *Runner) withOutcome(schema *arrow.Schema) bool {
	o := r.m.Encoding.Outcome
	return r.opt.NeedOutcome && o != nil && len(schema.FieldIndices(o.Column)) > 0
}

// Plan returns the layout of in's row groups rg (all of them for the zero
// range) when its scored Parquet output can copy their column chunks as
// bytes rather than decode and re-encode every column (the default
// whenever it applies), else nil, logging why when the reason is not
// plain: splicing off, a non-Parquet input or output.
func (r *Runner) Plan(in pipeline.Input, rg pipeline.RowGroupRange) *pipeline.SplicePlan {
	o := &r.opt
	if !o.Splice || o.Format != Parquet || in.Format != pipeline.FormatParquet || in.Path == pipeline.Stdin {
		return nil
	}
	// A reason that holds for every input (a flag) is told once; one about
	// a file, for each file.
	why := func(once bool, format string, args ...any) *pipeline.SplicePlan {
		if !once || !r.toldWhy {
			r.toldWhy = r.toldWhy || once
			r.logf("heft score: re-encoding every column: "+format, args...)
		}
		return nil
	}
	if o.RowGroupSet {
		return why(true, "--row-group-rows sets new row groups (copying column chunks keeps the input's)")
	}
	plan, err := pipeline.PlanSpliceRange(in.Path, rg)
	var ns *pipeline.NoSpliceError
	switch {
	case errors.As(err, &ns):
		return why(false, "%s", ns.Error())
	case err != nil:
		return nil // the general path reports what is wrong with the file
	}
	if c := plan.Compression(); o.CompressionSet && c != codecName(o.Compression) {
		if c == "" {
			c = "mixed or other codecs"
		}
		return why(false, "%s: its column chunks are %s, --compression asks for %s", in.Path, c, o.Compression)
	}
	return plan
}

// codecName is a --compression value in the spelling
// SplicePlan.Compression uses.
func codecName(flag string) string {
	c := strings.ToLower(flag)
	if c == "uncompressed" {
		return "none"
	}
	return c
}

// spliceCodec is the appended columns' codec: Compression when asked for,
// else the input's when all its chunks share one we write, else snappy.
func (r *Runner) spliceCodec(plan *pipeline.SplicePlan) string {
	if r.opt.CompressionSet {
		return r.opt.Compression
	}
	if c := plan.Compression(); c != "" {
		return c
	}
	return "snappy"
}
