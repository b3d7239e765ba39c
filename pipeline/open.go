package pipeline

import (
	"context"
	"fmt"
	"io"
	"os"
	"strings"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"
)

// DefaultBatchRows is the batch size when SourceOptions.BatchRows is 0.
const DefaultBatchRows = 65536

// SourceOptions say how to read inputs.
type SourceOptions struct {
	Alloc     memory.Allocator // nil = memory.DefaultAllocator
	BatchRows int              // target rows per batch; 0 = DefaultBatchRows (a batch never spans row groups)
	// Columns reads only these columns, in file order; nil = all. A name
	// neither in the file nor (with PartitionColumns) a partition key is an
	// *Error naming file and column.
	Columns []string
	// PartitionColumns appends hive partition keys as utf8 columns after the
	// file's columns, unless the file already has a column of that name. With
	// Columns set, only the keys it names are appended.
	PartitionColumns bool
	Stdin            io.Reader                 // used for Path "-"; nil = os.Stdin
	CSVTypes         map[string]arrow.DataType // type overrides for CSV columns; others are inferred

	// DictionaryColumns names Parquet string columns to read as Arrow
	// dictionary arrays: the page's dictionary is decoded once and rows come
	// as indices into it, which spares a consumer that maps each level to
	// something (the encoder) a string per row. The schema shows them as
	// dictionary<values=utf8, indices=int32>. Other formats ignore it.
	DictionaryColumns []string

	// RowGroups reads only this range of a Parquet file's row groups, so
	// that one large file can be split into units of work; the zero value
	// reads them all. Locations keep the file's own row-group and row
	// numbers. A range past the file's row groups is an *Error; other
	// formats refuse a range.
	RowGroups RowGroupRange

	// readDict reads Parquet BYTE_ARRAY columns as dictionaries. Only the
	// benchmark sets it, to compare with plain utf8 (see parquet_source.go).
	readDict bool
}

// RowGroupRange is the row groups [First, First+N) of a Parquet file;
// N = 0 is the whole file.
type RowGroupRange struct{ First, N int }

// All reports whether r is the whole file.
func (r RowGroupRange) All() bool { return r.N == 0 }

func (r RowGroupRange) String() string {
	if r.All() {
		return "all row groups"
	}
	if r.N == 1 {
		return fmt.Sprintf("row group %d", r.First)
	}
	return fmt.Sprintf("row groups %d-%d", r.First, r.First+r.N-1)
}

// check requires r to lie within a file of n row groups.
func (r RowGroupRange) check(n int) error {
	if r.All() {
		return nil
	}
	if r.First < 0 || r.N < 0 || r.First+r.N > n {
		return fmt.Errorf("%v asked for, but the file has %d row groups", r, n)
	}
	return nil
}

func (o SourceOptions) alloc() memory.Allocator {
	if o.Alloc == nil {
		return memory.DefaultAllocator
	}
	return o.Alloc
}

func (o SourceOptions) batchRows() int64 {
	if o.BatchRows <= 0 {
		return DefaultBatchRows
	}
	return int64(o.BatchRows)
}

func (o SourceOptions) stdin() io.Reader {
	if o.Stdin == nil {
		return os.Stdin
	}
	return o.Stdin
}

// MetadataSource is a Source that carries the input's key-value metadata, so
// that outputs can keep it: the Parquet file's key-value metadata (without
// the ARROW:schema entry) or an Arrow schema's metadata.
type MetadataSource interface {
	Metadata() arrow.Metadata
}

// PartitionedSource is a Source that appended hive partition columns; they
// are the last len(PartitionColumns()) columns of its schema, in this order.
// Sources without partition columns need not implement it.
type PartitionedSource interface {
	PartitionColumns() []string
}

// Open opens one input as a Source. Errors are *Error with File set. An
// Input with no Format (one not made by Expand) gets it as Expand would.
func Open(ctx context.Context, in Input, opt SourceOptions) (Source, error) {
	if err := ctx.Err(); err != nil {
		return nil, At(in.Path, err)
	}
	if in.Format == 0 {
		f, ok := FormatOf(in.Path)
		switch {
		case in.Path == Stdin:
			f = FormatArrowStream
		case !ok:
			var err error
			if f, err = sniff(in.Path); err != nil {
				return nil, locate(err, in.Path, -1, "")
			}
		}
		in.Format = f
	}
	if !opt.RowGroups.All() && in.Format != FormatParquet {
		return nil, At(in.Path, fmt.Errorf("%v asked for, but only Parquet files have row groups", opt.RowGroups))
	}
	p := newProjection(in, opt)
	var (
		src Source
		err error
	)
	switch in.Format {
	case FormatParquet:
		src, err = openParquet(in.Path, p, opt)
	case FormatArrowFile:
		src, err = openArrowFile(in.Path, p, opt)
	case FormatArrowStream:
		src, err = openArrowStream(in.Path, p, opt)
	case FormatCSV:
		src, err = openCSV(in.Path, p, opt)
	default:
		return nil, At(in.Path, fmt.Errorf("unknown input format %v", in.Format))
	}
	if err != nil {
		return nil, locate(err, in.Path, -1, "")
	}
	if len(p.parts) == 0 {
		return src, nil
	}
	return newPartitioned(src, p.parts, opt.alloc()), nil
}

// projection is what to read from one input: the wanted file columns and
// the partition columns to append.
type projection struct {
	file  string
	want  []string    // nil = every file column
	avail []Partition // partition columns on offer
	parts []Partition // partition columns to append, set by resolve
}

func newProjection(in Input, opt SourceOptions) *projection {
	p := &projection{file: in.Path, want: opt.Columns}
	if opt.PartitionColumns {
		p.avail = in.Partitions
	}
	return p
}

// resolve checks the file's schema for duplicate names and returns the
// indices of the wanted columns in file order. It settles which partition
// keys to append: those the file lacks and, with a column list, names.
func (p *projection) resolve(sc *arrow.Schema) ([]int, error) {
	if err := checkDuplicates(p.file, sc); err != nil {
		return nil, err
	}
	var want map[string]bool
	if p.want != nil {
		want = make(map[string]bool, len(p.want))
		for _, name := range p.want {
			want[name] = true
		}
	}
	var idx []int
	for i, f := range sc.Fields() {
		if want == nil || want[f.Name] {
			idx = append(idx, i)
		}
	}
	p.parts = nil
	added := make(map[string]bool)
	for _, pt := range p.avail {
		if added[pt.Key] || sc.HasField(pt.Key) {
			continue
		}
		if want != nil && !want[pt.Key] {
			continue
		}
		added[pt.Key] = true
		p.parts = append(p.parts, pt)
	}
	for _, name := range p.want {
		if !sc.HasField(name) && !added[name] {
			return nil, &Error{File: p.file, RowGroup: -1, Row: -1, Column: name, Err: fmt.Errorf("no such column (the file has %s)", columnList(sc))}
		}
	}
	return idx, nil
}

func checkDuplicates(file string, sc *arrow.Schema) error {
	seen := make(map[string]bool, sc.NumFields())
	var dups []string
	for _, f := range sc.Fields() {
		if seen[f.Name] {
			dups = append(dups, fmt.Sprintf("%q", f.Name))
		}
		seen[f.Name] = true
	}
	if len(dups) > 0 {
		return &Error{File: file, RowGroup: -1, Row: -1, Column: strings.Trim(dups[0], `"`), Err: fmt.Errorf("duplicate column name %s", strings.Join(dups, ", "))}
	}
	return nil
}

func columnList(sc *arrow.Schema) string {
	const most = 20
	names := make([]string, 0, min(sc.NumFields(), most))
	for i, f := range sc.Fields() {
		if i == most {
			names = append(names, fmt.Sprintf("... %d more", sc.NumFields()-most))
			break
		}
		names = append(names, fmt.Sprintf("%q", f.Name))
	}
	if len(names) == 0 {
		return "no columns"
	}
	return strings.Join(names, ", ")
}

// projectSchema keeps the fields at idx, with the given metadata.
func projectSchema(sc *arrow.Schema, idx []int, meta arrow.Metadata) *arrow.Schema {
	fields := make([]arrow.Field, len(idx))
	for i, j := range idx {
		fields[i] = sc.Field(j)
	}
	return arrow.NewSchema(fields, &meta)
}

// partitioned appends constant utf8 partition columns to another source.
type partitioned struct {
	Source
	parts  []Partition
	mem    memory.Allocator
	schema *arrow.Schema
	cur    arrow.RecordBatch
	err    error
}

func newPartitioned(src Source, parts []Partition, mem memory.Allocator) *partitioned {
	in := src.Schema()
	fields := append([]arrow.Field(nil), in.Fields()...)
	for _, pt := range parts {
		fields = append(fields, arrow.Field{Name: pt.Key, Type: arrow.BinaryTypes.String, Nullable: true})
	}
	meta := in.Metadata()
	return &partitioned{Source: src, parts: parts, mem: mem, schema: arrow.NewSchema(fields, &meta)}
}

func (p *partitioned) Schema() *arrow.Schema { return p.schema }

func (p *partitioned) PartitionColumns() []string {
	out := make([]string, len(p.parts))
	for i, pt := range p.parts {
		out[i] = pt.Key
	}
	return out
}

func (p *partitioned) Next(ctx context.Context) bool {
	p.release()
	if p.err != nil || !p.Source.Next(ctx) {
		return false
	}
	rec := p.Source.RecordBatch()
	n := int(rec.NumRows())
	cols := make([]arrow.Array, 0, len(p.schema.Fields()))
	cols = append(cols, rec.Columns()...)
	var extra []arrow.Array
	for _, pt := range p.parts {
		a := constantString(p.mem, pt.Value, n)
		extra = append(extra, a)
		cols = append(cols, a)
	}
	p.cur = array.NewRecordBatch(p.schema, cols, int64(n))
	for _, a := range extra {
		a.Release()
	}
	return true
}

func (p *partitioned) RecordBatch() arrow.RecordBatch { return p.cur }

func (p *partitioned) Err() error {
	if p.err != nil {
		return p.err
	}
	return p.Source.Err()
}

func (p *partitioned) Close() error {
	p.release()
	return p.Source.Close()
}

func (p *partitioned) Metadata() arrow.Metadata {
	if m, ok := p.Source.(MetadataSource); ok {
		return m.Metadata()
	}
	return arrow.Metadata{}
}

func (p *partitioned) release() {
	if p.cur != nil {
		p.cur.Release()
		p.cur = nil
	}
}

// constantString builds n copies of v; the hive null marker gives nulls.
func constantString(mem memory.Allocator, v string, n int) arrow.Array {
	b := array.NewStringBuilder(mem)
	defer b.Release()
	if v == hiveNull {
		b.AppendNulls(n)
		return b.NewArray()
	}
	b.Reserve(n)
	b.ReserveData(n * len(v))
	for range n {
		b.Append(v)
	}
	return b.NewArray()
}
