package pipeline

import (
	"context"
	"encoding/base64"
	"errors"
	"fmt"
	"hash/maphash"
	"io"
	"math"
	"runtime"
	"strings"
	"sync"
	"sync/atomic"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/bitutil"
	"github.com/apache/arrow-go/v18/arrow/flight"
	"github.com/apache/arrow-go/v18/arrow/memory"
	"github.com/apache/arrow-go/v18/parquet"
	"github.com/apache/arrow-go/v18/parquet/compress"
	"github.com/apache/arrow-go/v18/parquet/file"
	"github.com/apache/arrow-go/v18/parquet/metadata"
	"github.com/apache/arrow-go/v18/parquet/pqarrow"
	pqschema "github.com/apache/arrow-go/v18/parquet/schema"
)

// DefaultRowGroupRows is the row group size when ParquetSinkOptions leaves
// it zero.
const DefaultRowGroupRows = 131072

// ParquetSinkOptions configure a Parquet sink. The zero value writes snappy
// row groups of DefaultRowGroupRows rows.
type ParquetSinkOptions struct {
	Compression  string         // "snappy" (default), "zstd", "gzip", "none"
	RowGroupRows int64          // 0 = DefaultRowGroupRows; batches are split/merged to fill row groups
	Metadata     arrow.Metadata // key-value metadata for the footer (the caller merges input's and heft's own)
	CreatedBy    string         // e.g. "heft 0.1.0"; no timestamps anywhere, so the bytes are a function of the input
	Alloc        memory.Allocator

	// Workers is how many columns of a row group are encoded at once;
	// 0 = runtime.GOMAXPROCS(0), 1 = one after another. The bytes do not
	// depend on it.
	Workers int
	// DataPageSize is the target size of a data page before compression;
	// 0 = 1 MiB.
	DataPageSize int64
	// Dictionary chooses the columns that are dictionary encoded. "" or
	// "auto": string, binary and dictionary columns, and the numeric
	// columns whose first batch repeats values (at most half distinct in a
	// sample of its first rows), like a count or a code; "strings": string,
	// binary and dictionary columns only; "all"; "none". Trying a dictionary
	// on continuous numbers costs a hash per value and falls back to plain
	// encoding anyway, hence the sample.
	Dictionary string
	// NoStatistics leaves out the per-column min/max/null-count statistics.
	NoStatistics bool
	// NoArrowSchema leaves out the serialized Arrow schema ("ARROW:schema"),
	// which lets Arrow readers restore types Parquet cannot express.
	NoArrowSchema bool
	// PageIndex writes a column index and an offset index for every column.
	PageIndex bool
}

// NewParquetSink writes a Parquet file that appears at target only when
// Close returns nil (see CreateAtomic).
func NewParquetSink(target string, schema *arrow.Schema, opt ParquetSinkOptions) (Committer, error) {
	af, err := CreateAtomic(target)
	if err != nil {
		return nil, err
	}
	s, err := newParquetSink(af, target, schema, opt)
	if err != nil {
		af.Abort()
		return nil, err
	}
	s.atomic = af
	return s, nil
}

// NewParquetWriter writes a Parquet file to w. Close flushes the footer but
// does not close w; Abort is a no-op.
func NewParquetWriter(w io.Writer, schema *arrow.Schema, opt ParquetSinkOptions) (Committer, error) {
	return newParquetSink(noClose{w}, "", schema, opt)
}

// noClose hides w's Close from the Parquet writer, which closes its sink.
type noClose struct{ io.Writer }

type parquetSink struct {
	name     string // target, for errors
	atomic   *AtomicFile
	schema   *arrow.Schema
	w        io.Writer
	props    []parquet.WriterProperty // all but the dictionary choice
	dict     string
	pqSchema *pqschema.Schema
	kv       metadata.KeyValueMetadata
	tail     *footerTail  // between fw and w
	fw       *file.Writer // nil until the first batch
	rgw      file.BufferedRowGroupWriter
	rgRows   int64 // rows in rgw so far
	maxRows  int64
	workers  int
	ones     []int16 // definition levels of an all-valid column
	scratch  [][]int16
	mem      memory.Allocator
	strDicts []strDict         // per column, for the current row group
	ctxs     []context.Context // one Arrow write context per worker
	err      error             // sticky
	closed   bool
}

func newParquetSink(w io.Writer, name string, schema *arrow.Schema, opt ParquetSinkOptions) (*parquetSink, error) {
	fail := func(err error) (*parquetSink, error) { return nil, At(name, err) }
	for _, f := range schema.Fields() {
		if !flatType(f.Type) {
			return fail(fmt.Errorf("column %q: nested type %s cannot be written; heft writes flat tables", f.Name, f.Type))
		}
	}
	codec, err := parseCompression(opt.Compression)
	if err != nil {
		return fail(err)
	}
	mem := opt.Alloc
	if mem == nil {
		mem = memory.DefaultAllocator
	}
	rows := opt.RowGroupRows
	if rows <= 0 {
		rows = DefaultRowGroupRows
	}
	props := []parquet.WriterProperty{
		parquet.WithAllocator(mem),
		parquet.WithCompression(codec),
		parquet.WithMaxRowGroupLength(rows),
		parquet.WithStats(!opt.NoStatistics),
	}
	if opt.CreatedBy != "" {
		props = append(props, parquet.WithCreatedBy(opt.CreatedBy))
	}
	if opt.PageIndex {
		props = append(props, parquet.WithPageIndexEnabled(true))
	}
	if opt.DataPageSize > 0 {
		props = append(props, parquet.WithDataPageSize(opt.DataPageSize))
	}
	switch opt.Dictionary {
	case "", "auto", "strings", "all", "none":
	default:
		return fail(fmt.Errorf("unknown dictionary choice %q (want auto, strings, all or none)", opt.Dictionary))
	}
	arrProps := pqarrow.NewArrowWriterProperties(pqarrow.WithAllocator(mem))
	pqSchema, err := pqarrow.ToParquet(schema, parquet.NewWriterProperties(props...), arrProps)
	if err != nil {
		return fail(fmt.Errorf("convert schema: %w", err))
	}
	kv := make(metadata.KeyValueMetadata, 0, opt.Metadata.Len()+1)
	for i, k := range opt.Metadata.Keys() {
		kv.Append(k, opt.Metadata.Values()[i])
	}
	if !opt.NoArrowSchema {
		// The footer already holds the metadata; keep it out of the copy.
		bare := arrow.NewSchema(schema.Fields(), nil)
		kv.Append("ARROW:schema", base64.StdEncoding.EncodeToString(flight.SerializeSchema(bare, mem)))
	}
	workers := opt.Workers
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	if workers > len(schema.Fields()) {
		workers = max(1, len(schema.Fields()))
	}
	s := &parquetSink{
		name:     name,
		schema:   schema,
		w:        w,
		props:    props,
		dict:     opt.Dictionary,
		pqSchema: pqSchema,
		kv:       kv,
		maxRows:  rows,
		workers:  workers,
		scratch:  make([][]int16, workers),
		mem:      mem,
		strDicts: make([]strDict, len(schema.Fields())),
		ctxs:     make([]context.Context, workers),
	}
	for i := range s.ctxs {
		p := arrProps
		s.ctxs[i] = pqarrow.NewArrowWriteContext(context.Background(), &p)
	}
	return s, nil
}

// start chooses the dictionary columns, which may look at the first batch
// (nil for an empty output), and writes the file header.
func (s *parquetSink) start(first arrow.RecordBatch) error {
	props := s.props
	switch s.dict {
	case "all":
		props = append(props, parquet.WithDictionaryDefault(true))
	case "none":
		props = append(props, parquet.WithDictionaryDefault(false))
	default:
		props = append(props, parquet.WithDictionaryDefault(false))
		for i, f := range s.schema.Fields() {
			switch f.Type.ID() {
			case arrow.STRING, arrow.LARGE_STRING, arrow.BINARY, arrow.LARGE_BINARY, arrow.DICTIONARY:
				props = append(props, parquet.WithDictionaryFor(f.Name, true))
			default:
				if s.dict != "strings" && first != nil && repeats(first.Column(i)) {
					props = append(props, parquet.WithDictionaryFor(f.Name, true))
				}
			}
		}
	}
	s.tail = &footerTail{w: s.w}
	fw, err := file.NewParquetWriterWithError(s.tail, s.pqSchema.Root(), file.WithWriterProps(parquet.NewWriterProperties(props...)), file.WithWriteMetadata(s.kv))
	if err != nil {
		return s.fail(-1, "", fmt.Errorf("start file: %w", err))
	}
	s.fw = fw
	return nil
}

// dictSample is how many leading values of a numeric column repeats looks
// at; a choice worth a fraction of a millisecond per column.
const dictSample = 8192

// repeats reports whether at most half of the first dictSample valid values
// of a numeric column are distinct, so that a dictionary is likely to pay.
// Other types report false.
func repeats(arr arrow.Array) bool {
	var key func(i int) uint64
	switch a := arr.(type) {
	case *array.Int64:
		key = func(i int) uint64 { return uint64(a.Value(i)) }
	case *array.Int32:
		key = func(i int) uint64 { return uint64(a.Value(i)) }
	case *array.Int16:
		key = func(i int) uint64 { return uint64(a.Value(i)) }
	case *array.Int8:
		key = func(i int) uint64 { return uint64(a.Value(i)) }
	case *array.Uint64:
		key = func(i int) uint64 { return a.Value(i) }
	case *array.Uint16:
		key = func(i int) uint64 { return uint64(a.Value(i)) }
	case *array.Uint8:
		key = func(i int) uint64 { return uint64(a.Value(i)) }
	case *array.Uint32:
		key = func(i int) uint64 { return uint64(a.Value(i)) }
	case *array.Float64:
		key = func(i int) uint64 { return math.Float64bits(a.Value(i)) }
	case *array.Float32:
		key = func(i int) uint64 { return uint64(math.Float32bits(a.Value(i))) }
	case *array.Date32:
		key = func(i int) uint64 { return uint64(a.Value(i)) }
	case *array.Timestamp:
		key = func(i int) uint64 { return uint64(a.Value(i)) }
	default:
		return false
	}
	seen := make(map[uint64]struct{}, 256)
	valid := 0
	for i := 0; i < arr.Len() && valid < dictSample; i++ {
		if arr.IsNull(i) {
			continue
		}
		valid++
		seen[key(i)] = struct{}{}
		if len(seen) > dictSample/2 {
			return false
		}
	}
	return valid > 0 && 2*len(seen) <= valid
}

// flatType reports whether t is stored as a single Parquet leaf column.
func flatType(t arrow.DataType) bool {
	if ext, ok := t.(arrow.ExtensionType); ok {
		t = ext.StorageType()
	}
	if d, ok := t.(*arrow.DictionaryType); ok {
		t = d.ValueType
	}
	_, nested := t.(arrow.NestedType)
	return !nested
}

func parseCompression(name string) (compress.Compression, error) {
	switch strings.ToLower(name) {
	case "", "snappy":
		return compress.Codecs.Snappy, nil
	case "zstd":
		return compress.Codecs.Zstd, nil
	case "gzip":
		return compress.Codecs.Gzip, nil
	case "none", "uncompressed":
		return compress.Codecs.Uncompressed, nil
	}
	return 0, fmt.Errorf("unknown compression %q (want snappy, zstd, gzip or none)", name)
}

// Write appends rec, splitting it at row group boundaries.
func (s *parquetSink) Write(ctx context.Context, rec arrow.RecordBatch) error {
	if s.err != nil {
		return s.err
	}
	if s.closed {
		return At(s.name, errors.New("write after close"))
	}
	if col, err := sameColumns(s.schema, rec); err != nil {
		return s.fail(-1, col, err)
	}
	if s.fw == nil {
		if err := s.start(rec); err != nil {
			return err
		}
	}
	n := rec.NumRows()
	for off := int64(0); off < n; {
		if err := ctx.Err(); err != nil {
			return err
		}
		if s.rgw == nil {
			rgw, err := s.fw.AppendBufferedRowGroupChecked()
			if err != nil {
				return s.fail(s.fw.NumRowGroups(), "", err)
			}
			s.rgw, s.rgRows = rgw, 0
		}
		k := min(n-off, s.maxRows-s.rgRows)
		part := rec
		if k != n {
			part = rec.NewSlice(off, off+k)
		}
		err := s.writeColumns(part)
		if k != n {
			part.Release()
		}
		if err != nil {
			return err
		}
		s.rgRows += k
		off += k
		if s.rgRows == s.maxRows {
			if err := s.closeRowGroup(); err != nil {
				return err
			}
		}
	}
	return nil
}

// sameColumns checks that rec has the columns the file was started with:
// names, types and nullability (field metadata may differ; it is not written
// per batch). It names the first column that differs.
func sameColumns(sc *arrow.Schema, rec arrow.RecordBatch) (string, error) {
	got := rec.Schema()
	if got.NumFields() != sc.NumFields() {
		return "", fmt.Errorf("batch has %d columns, the output %d", got.NumFields(), sc.NumFields())
	}
	for i, f := range sc.Fields() {
		g := got.Field(i)
		switch {
		case g.Name != f.Name:
			return f.Name, fmt.Errorf("batch has column %q in this place", g.Name)
		case !arrow.TypeEqual(g.Type, f.Type):
			return f.Name, fmt.Errorf("batch column has type %s, the output %s", g.Type, f.Type)
		case !f.Nullable && rec.Column(i).NullN() > 0:
			return f.Name, fmt.Errorf("%d nulls in a column declared non-nullable", rec.Column(i).NullN())
		}
	}
	return "", nil
}

// writeColumns encodes the columns of rec into the current row group.
func (s *parquetSink) writeColumns(rec arrow.RecordBatch) error {
	if n := int(rec.NumRows()); len(s.ones) < n {
		s.ones = make([]int16, n)
		for j := range s.ones {
			s.ones[j] = 1
		}
	}
	return s.eachColumn(func(w, i int) error { return s.writeColumn(w, i, rec.Column(i)) })
}

// eachColumn runs fn for every column, up to s.workers at once; each column
// writer is used by one goroutine only, so the writers need no locking. It
// returns the error of the first column that failed.
func (s *parquetSink) eachColumn(fn func(worker, col int) error) error {
	ncol := s.schema.NumFields()
	errs := make([]error, ncol)
	var next atomic.Int64
	work := func(w int) {
		for {
			i := int(next.Add(1)) - 1
			if i >= ncol {
				return
			}
			errs[i] = fn(w, i)
		}
	}
	if s.workers <= 1 || ncol <= 1 {
		work(0)
	} else {
		var wg sync.WaitGroup
		for w := 1; w < s.workers; w++ {
			wg.Add(1)
			go func() { defer wg.Done(); work(w) }()
		}
		work(0)
		wg.Wait()
	}
	for i, err := range errs {
		if err != nil {
			return s.fail(s.fw.NumRowGroups()-1, s.schema.Field(i).Name, err)
		}
	}
	return nil
}

// pageFlusher is the exported method pqarrow's column writers have for
// ending the current data page.
type pageFlusher interface{ FlushCurrentPage() error }

// flushTail encodes and compresses the last, partly filled data page of
// column i, work that rgw.Close would otherwise do one column after the
// other. Page boundaries are the same either way, so the bytes are too.
func (s *parquetSink) flushTail(i int) (err error) {
	defer func() {
		if p := recover(); p != nil {
			err = fmt.Errorf("internal error in Parquet encoder: %v", p)
		}
	}()
	cw, err := s.rgw.Column(i)
	if err != nil {
		return err
	}
	f, ok := cw.(pageFlusher)
	enc := cw.CurrentEncoder()
	if !ok || enc == nil {
		return nil
	}
	// A dictionary encoder's size estimate is never zero; the raw bytes it
	// took since the last page are.
	buffered := enc.EstimatedDataEncodedSize()
	if d, ok := enc.(rawSizer); ok {
		buffered = d.ObservedRawSize()
	}
	if buffered == 0 {
		return nil // nothing buffered, or only nulls: Close handles it
	}
	return f.FlushCurrentPage()
}

// rawSizer is the method dictionary encoders have for the raw input bytes
// of the current page.
type rawSizer interface{ ObservedRawSize() int64 }

func (s *parquetSink) writeColumn(w, i int, arr arrow.Array) (err error) {
	defer func() {
		if p := recover(); p != nil {
			err = fmt.Errorf("internal error in Parquet encoder: %v", p)
		}
	}()
	cw, err := s.rgw.Column(i)
	if err != nil {
		return err
	}
	var def []int16
	if cw.Descr().MaxDefinitionLevel() > 0 {
		def = s.defLevels(w, arr)
	}
	if str, ok := arr.(*array.String); ok && dictEncoding(cw.CurrentEncoder().Encoding()) {
		d := &s.strDicts[i]
		direct := d.dict != nil && d.preserved(cw)
		if idx := d.encode(s.mem, str); idx != nil {
			defer idx.Release()
			if direct {
				return d.writeIndices(cw, idx, def)
			}
			da := array.NewDictionaryArray(&arrow.DictionaryType{IndexType: arrow.PrimitiveTypes.Int32, ValueType: arrow.BinaryTypes.String}, idx, d.dict)
			defer da.Release()
			arr = da
		}
	}
	return pqarrow.WriteArrowToColumn(s.ctxs[w], cw, arr, def, nil, s.schema.Field(i).Nullable)
}

// preserved reports whether the column writer's dictionary is the one d
// handed it with the row group's first batch, so that d's indices are the
// column's.
func (d *strDict) preserved(cw file.ColumnChunkWriter) bool {
	enc, ok := cw.CurrentEncoder().(interface{ PreservedDictionary() arrow.Array })
	if !ok {
		return false
	}
	p := enc.PreservedDictionary()
	return p != nil && p.Len() == len(d.levels)
}

// writeIndices writes a batch whose levels are all in the column's
// dictionary: what pqarrow does for a dictionary array, without the unique
// pass over the indices it makes for the page statistics when the
// dictionary is not the same Go value as before (and it never is: each
// Arrow dictionary array wraps its dictionary anew). Like pqarrow's own
// same-dictionary case, min and max are taken over the whole dictionary.
func (d *strDict) writeIndices(cw file.ColumnChunkWriter, idx arrow.Array, def []int16) error {
	if ps := cw.PageStatistics(); ps != nil {
		nonNull := idx.Len() - idx.NullN()
		ps.IncNulls(int64(max(len(def)-nonNull, 0)))
		ps.IncNumValues(int64(nonNull))
		if err := ps.UpdateFromArrow(d.dict, false); err != nil {
			return err
		}
	}
	return cw.WriteDictIndices(idx, def, nil)
}

func dictEncoding(e parquet.Encoding) bool {
	return e == parquet.Encodings.PlainDict || e == parquet.Encodings.RLEDict
}

// strDictLimit bounds the levels strDict keeps for one row group. Past it a
// column is left to the library: a column with that many levels is more
// like names than a category, later batches would keep bringing new ones
// (each such batch costs a wasted pass), and pqarrow falls back to plain
// encoding at 1 MiB of dictionary anyway.
const strDictLimit = 4096

// strDict turns a string column into an Arrow dictionary array whose
// dictionary stays the same for a whole row group, so that pqarrow
// takes its direct path: it writes the indices and hashes only the
// dictionary, where a plain string array costs a boxed hash lookup per
// value. The dictionary is the levels of the row group's first batch; a
// later batch with a level outside it is handed over as plain strings,
// which pqarrow adds to the same column dictionary (the Parquet bytes are
// the same either way; only the time differs).
type strDict struct {
	seed   maphash.Seed
	slots  []int32  // open addressing over levels: index+1, 0 for empty
	levels []string // in index order
	dict   arrow.Array
	off    bool // too many levels: leave this row group to the library
}

func (d *strDict) reset() {
	if d.dict != nil {
		d.dict.Release()
	}
	*d = strDict{}
}

// lookup returns v's index, or -1 and the empty slot where v would go.
func (d *strDict) lookup(v string) (idx int32, slot int) {
	mask := len(d.slots) - 1
	for i := int(maphash.String(d.seed, v)) & mask; ; i = (i + 1) & mask {
		k := d.slots[i]
		if k == 0 {
			return -1, i
		}
		if d.levels[k-1] == v {
			return k - 1, i
		}
	}
}

func (d *strDict) insert(v string, slot int) int32 {
	d.levels = append(d.levels, strings.Clone(v)) // v points into a batch its owner will reuse
	k := int32(len(d.levels))
	d.slots[slot] = k
	if 2*len(d.levels) > len(d.slots) { // keep the table at most half full
		d.slots = make([]int32, 2*len(d.slots))
		for j, l := range d.levels {
			_, s := d.lookup(l)
			d.slots[s] = int32(j + 1)
		}
	}
	return k - 1
}

// encode returns the indices of str's values in d's levels (the levels are
// taken from str when it is the row group's first batch), or nil to write
// str as it is.
func (d *strDict) encode(mem memory.Allocator, str *array.String) arrow.Array {
	if d.off {
		return nil
	}
	first := d.dict == nil
	if first {
		d.seed = maphash.MakeSeed()
		d.slots = make([]int32, 64)
		d.levels = d.levels[:0]
	}
	n, nulls := str.Len(), str.NullN()
	buf := memory.NewResizableBuffer(mem)
	defer buf.Release()
	buf.Resize(n * arrow.Int32SizeBytes)
	idx := arrow.Int32Traits.CastFromBytes(buf.Bytes())
	for i := range n {
		if nulls > 0 && str.IsNull(i) {
			idx[i] = 0
			continue
		}
		v := str.Value(i)
		k, slot := d.lookup(v)
		if k < 0 {
			if !first {
				return nil
			}
			if len(d.levels) == strDictLimit {
				d.off = true
				return nil
			}
			k = d.insert(v, slot)
		}
		idx[i] = k
	}
	if first {
		sb := array.NewStringBuilder(mem)
		sb.AppendValues(d.levels, nil)
		d.dict = sb.NewArray()
		sb.Release()
	}
	bufs := []*memory.Buffer{nil, buf}
	if nulls > 0 {
		valid := memory.NewResizableBuffer(mem)
		defer valid.Release()
		valid.Resize(int(bitutil.BytesForBits(int64(n))))
		bitutil.CopyBitmap(str.NullBitmapBytes(), str.Data().Offset(), n, valid.Bytes(), 0)
		bufs[0] = valid
	}
	data := array.NewData(arrow.PrimitiveTypes.Int32, n, bufs, nil, nulls, 0)
	defer data.Release()
	return array.MakeFromData(data)
}

// defLevels returns the definition levels of a flat optional column: 1 for
// a value, 0 for a null.
func (s *parquetSink) defLevels(w int, arr arrow.Array) []int16 {
	n := arr.Len()
	if arr.NullN() == 0 {
		return s.ones[:n] // read-only, shared by the workers
	}
	buf := s.scratch[w]
	if cap(buf) < n {
		buf = make([]int16, n)
		s.scratch[w] = buf
	}
	buf = buf[:n]
	for j := range buf {
		if arr.IsValid(j) {
			buf[j] = 1
		} else {
			buf[j] = 0
		}
	}
	return buf
}

func (s *parquetSink) closeRowGroup() error {
	rg := s.fw.NumRowGroups() - 1
	if err := s.eachColumn(func(_, i int) error { return s.flushTail(i) }); err != nil {
		s.rgw = nil
		return err
	}
	err := s.rgw.Close()
	s.rgw = nil
	s.resetDicts()
	if err != nil {
		return s.fail(rg, "", err)
	}
	return nil
}

func (s *parquetSink) resetDicts() {
	for i := range s.strDicts {
		s.strDicts[i].reset()
	}
}

func (s *parquetSink) fail(rowGroup int, column string, err error) error {
	if s.err == nil {
		s.err = &Error{File: s.name, RowGroup: rowGroup, Row: -1, Column: column, Err: fmt.Errorf("write Parquet: %w", err)}
	}
	return s.err
}

// Close finishes the last row group and the footer and, for a file sink,
// commits the file. After a failed Write it aborts and returns that error.
func (s *parquetSink) Close() error {
	if s.closed {
		return s.err
	}
	s.closed = true
	if s.err == nil && s.fw == nil {
		s.start(nil) // no batches: a valid file with no row groups
	}
	if s.err == nil && s.rgw != nil {
		s.closeRowGroup()
	}
	if s.err == nil {
		s.tail.capture = true
		if err := s.fw.Close(); err != nil {
			s.fail(-1, "", err)
		} else if err := s.tail.flush(); err != nil {
			s.fail(-1, "", err)
		}
	} else if s.fw != nil {
		s.fw.Close()
	}
	s.resetDicts()
	s.err = finishAtomic(s.atomic, s.err)
	return s.err
}

// Abort drops the output; for a file sink the target is left untouched.
// A writer sink writes nothing more to its writer.
func (s *parquetSink) Abort() error {
	if s.closed {
		if s.atomic != nil {
			return s.atomic.Abort()
		}
		return nil
	}
	s.closed = true
	if s.err == nil {
		s.err = At(s.name, errors.New("aborted"))
	}
	if s.atomic == nil {
		s.resetDicts()
		return nil
	}
	// Finishing into the doomed temporary file releases the encoder's buffers.
	if s.rgw != nil {
		s.rgw.Close()
		s.rgw = nil
	}
	if s.fw != nil {
		s.fw.Close()
	}
	s.resetDicts()
	return s.atomic.Abort()
}

var _ Committer = (*parquetSink)(nil)
