package pipeline

import (
	"context"
	"encoding/base64"
	"fmt"
	"os"
	"runtime"
	"slices"
	"sync"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"
	"github.com/apache/arrow-go/v18/parquet"
	"github.com/apache/arrow-go/v18/parquet/file"
	"github.com/apache/arrow-go/v18/parquet/pqarrow"
)

// arrowSchemaKey is the key-value entry in which Arrow writers store their
// serialized schema; it is a reading aid, not user metadata.
const arrowSchemaKey = "ARROW:schema"

// parquetSource reads a Parquet file one row group at a time, batch by
// batch, so that Location is exact and memory is bounded by a batch: pages
// are streamed from the file (BufferedStreamEnabled), never whole column
// chunks. Columns of a batch are decoded in parallel by our own goroutines,
// not pqarrow's, because a panic in a goroutine we do not own cannot be
// recovered.
//
// String columns come as plain utf8: reading them as dictionaries was not
// faster on BenchmarkParquetRead. A file written from Arrow keeps the types
// its ARROW:schema entry records, so dictionary and large_string columns
// come back as such.
type parquetSource struct {
	path   string
	pf     *file.Reader
	fr     *pqarrow.FileReader
	mem    memory.Allocator
	batch  int64
	fields []int   // top-level field indices read
	leaves [][]int // leaf column indices of each field
	schema *arrow.Schema
	meta   arrow.Metadata

	rg      int   // current row group, -1 before the first
	rgRows  int64 // rows in the current row group
	rgDone  int64 // rows of it already handed out
	rgStart int64 // file row of its first row
	rgEnd   int   // one past the last row group read
	readers []*pqarrow.ColumnReader

	cur arrow.RecordBatch
	loc Location
	err error
}

func openParquet(path string, p *projection, opt SourceOptions) (Source, error) {
	s := &parquetSource{path: path, mem: opt.alloc(), batch: opt.batchRows(), rg: -1, loc: Location{File: path, RowGroup: -1}}
	err := guard(path, func() error {
		props := parquet.NewReaderProperties(s.mem)
		props.BufferedStreamEnabled = true
		pf, err := openParquetFile(path, props)
		if err != nil {
			return err
		}
		s.pf = pf
		if v := pf.MetaData().KeyValueMetadata().FindValue(arrowSchemaKey); v != nil {
			if err := checkArrowSchemaEntry(*v); err != nil {
				return fmt.Errorf("%s metadata: %w", arrowSchemaKey, err)
			}
		}
		arrProps := pqarrow.ArrowReadProperties{BatchSize: s.batch}
		sc := pf.MetaData().Schema
		for i := range sc.NumColumns() {
			c := sc.Column(i)
			if c.PhysicalType() == parquet.Types.ByteArray && (opt.readDict || slices.Contains(opt.DictionaryColumns, c.ColumnPath().String())) {
				arrProps.SetReadDict(i, true)
			}
		}
		s.fr, err = pqarrow.NewFileReader(pf, arrProps, s.mem)
		if err != nil {
			return err
		}
		return s.selectRowGroups(opt.RowGroups)
	})
	if err != nil {
		s.Close()
		return nil, err
	}
	m := s.fr.Manifest
	full := make([]arrow.Field, len(m.Fields))
	for i := range m.Fields {
		full[i] = withoutNoFieldID(*m.Fields[i].Field)
	}
	kv := s.pf.MetaData().KeyValueMetadata()
	var keys, vals []string
	kvals := kv.Values()
	for i, k := range kv.Keys() {
		if k != arrowSchemaKey {
			keys = append(keys, k)
			vals = append(vals, kvals[i])
		}
	}
	s.meta = arrow.NewMetadata(keys, vals)
	fullSchema := arrow.NewSchema(full, nil)
	idx, err := p.resolve(fullSchema)
	if err != nil {
		s.Close()
		return nil, err
	}
	s.fields = idx
	s.leaves = make([][]int, len(idx))
	for i, j := range idx {
		s.leaves[i] = leafIndices(&m.Fields[j], nil)
	}
	s.schema = projectSchema(fullSchema, idx, s.meta)
	return s, nil
}

// withoutNoFieldID drops the "PARQUET:field_id": "-1" entry pqarrow puts on
// every field of a file without field ids: it says nothing, and it would
// make a Parquet input's schema differ from the same columns read elsewhere.
// Nested fields are left as they are.
func withoutNoFieldID(f arrow.Field) arrow.Field {
	const key = "PARQUET:field_id"
	i := f.Metadata.FindKey(key)
	if i < 0 || f.Metadata.Values()[i] != "-1" {
		return f
	}
	var keys, vals []string
	for j, k := range f.Metadata.Keys() {
		if j != i {
			keys = append(keys, k)
			vals = append(vals, f.Metadata.Values()[j])
		}
	}
	f.Metadata = arrow.NewMetadata(keys, vals)
	return f
}

// checkArrowSchemaEntry checks the IPC schema message that Arrow writers
// store, base64-encoded, in a Parquet file's ARROW:schema entry, decoding it
// as pqarrow does. Undecodable text is left for pqarrow to report.
func checkArrowSchemaEntry(v string) error {
	var (
		b   []byte
		err error
	)
	if len(v)%4 == 0 {
		b, err = base64.StdEncoding.DecodeString(v)
	}
	if len(b) == 0 || err != nil {
		if b, err = base64.RawStdEncoding.DecodeString(v); err != nil {
			return nil
		}
	}
	return checkIPCMessage(b)
}

// openParquetFile opens path and reads its footer.
func openParquetFile(path string, props *parquet.ReaderProperties) (*file.Reader, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	ok := false
	defer func() { // also when the footer parser panics
		if !ok {
			f.Close()
		}
	}()
	if err := checkParquetMagic(f); err != nil {
		return nil, err
	}
	pf, err := file.NewParquetReader(f, file.WithReadProps(props))
	if err != nil {
		return nil, err
	}
	ok = true
	return pf, nil
}

// checkParquetMagic gives a plain answer for the commonest bad input, a
// file that is not Parquet at all, before the footer parser tries it.
func checkParquetMagic(f *os.File) error {
	info, err := f.Stat()
	if err != nil {
		return err
	}
	const minSize = 12 // head magic, footer length, tail magic
	if info.Size() < minSize {
		return fmt.Errorf("%w: not a Parquet file: %d bytes is too small", ErrMalformed, info.Size())
	}
	var head, tail [4]byte
	if _, err := f.ReadAt(head[:], 0); err != nil {
		return err
	}
	if _, err := f.ReadAt(tail[:], info.Size()-4); err != nil {
		return err
	}
	// PARE ends a file with an encrypted footer; the reader explains that.
	if string(head[:]) != "PAR1" || (string(tail[:]) != "PAR1" && string(tail[:]) != "PARE") {
		return fmt.Errorf("%w: not a Parquet file: it does not start and end with PAR1 (truncated, or another format)", ErrMalformed)
	}
	return nil
}

func leafIndices(f *pqarrow.SchemaField, out []int) []int {
	if f.IsLeaf() {
		return append(out, f.ColIndex)
	}
	for i := range f.Children {
		out = leafIndices(&f.Children[i], out)
	}
	return out
}

func (s *parquetSource) Schema() *arrow.Schema          { return s.schema }
func (s *parquetSource) RecordBatch() arrow.RecordBatch { return s.cur }
func (s *parquetSource) Location() Location             { return s.loc }
func (s *parquetSource) Err() error                     { return s.err }
func (s *parquetSource) Metadata() arrow.Metadata       { return s.meta }

func (s *parquetSource) Next(ctx context.Context) bool {
	s.releaseBatch()
	if s.err != nil {
		return false
	}
	for s.readers == nil || s.rgDone == s.rgRows {
		if s.rg >= 0 {
			s.rgStart += s.rgRows
		}
		s.releaseReaders()
		if s.rg+1 >= s.rgEnd {
			return false
		}
		s.rg++
		s.rgRows, s.rgDone = s.pf.MetaData().RowGroup(s.rg).NumRows(), 0
		if s.rgRows < 0 {
			s.fail(-1, fmt.Errorf("%w: footer gives %d rows", ErrMalformed, s.rgRows))
			return false
		}
		if s.rgRows == 0 {
			continue
		}
		if err := s.openRowGroup(ctx); err != nil {
			s.err = err
			return false
		}
	}
	if err := ctx.Err(); err != nil {
		s.err = s.errAt(-1, err)
		return false
	}
	n := min(s.batch, s.rgRows-s.rgDone)
	cols, err := s.readBatch(n)
	if err != nil {
		s.err = err
		return false
	}
	s.cur = array.NewRecordBatch(s.schema, cols, n)
	for _, c := range cols {
		c.Release()
	}
	s.loc = Location{File: s.path, RowGroup: s.rg, Row: s.rgStart + s.rgDone}
	s.rgDone += n
	return true
}

// selectRowGroups sets the source to read the row groups r: it starts
// before r.First, at the file row of that row group's first row.
func (s *parquetSource) selectRowGroups(r RowGroupRange) error {
	md := s.pf.MetaData()
	s.rgEnd = md.NumRowGroups()
	if r.All() {
		return nil
	}
	if err := r.check(s.rgEnd); err != nil {
		return err
	}
	for i := range r.First {
		n := md.RowGroup(i).NumRows()
		if n < 0 {
			return fmt.Errorf("%w: row group %d: footer gives %d rows", ErrMalformed, i, n)
		}
		s.rgStart += n
	}
	s.rg, s.rgEnd = r.First-1, r.First+r.N
	return nil
}

func (s *parquetSource) openRowGroup(ctx context.Context) error {
	s.readers = make([]*pqarrow.ColumnReader, len(s.fields))
	for i, fi := range s.fields {
		included := make(map[int]bool, len(s.leaves[i]))
		for _, l := range s.leaves[i] {
			included[l] = true
		}
		err := guard(s.path, func() error {
			r, err := s.fr.GetFieldReader(ctx, fi, included, []int{s.rg})
			s.readers[i] = r
			return err
		})
		if err != nil {
			return s.errAt(i, err)
		}
	}
	return nil
}

// readBatch decodes the next n rows of every column.
func (s *parquetSource) readBatch(n int64) ([]arrow.Array, error) {
	cols := make([]arrow.Array, len(s.readers))
	errs := make([]error, len(s.readers))
	read := func(i int) {
		errs[i] = guard(s.path, func() error {
			ch, err := s.readers[i].NextBatch(n)
			if err != nil {
				return err
			}
			defer ch.Release()
			if int64(ch.Len()) != n {
				return fmt.Errorf("%w: column chunk holds %d of the row group's %d rows", ErrMalformed, s.rgDone+int64(ch.Len()), s.rgRows)
			}
			if len(ch.Chunks()) == 1 {
				a := ch.Chunk(0)
				a.Retain()
				cols[i] = a
				return nil
			}
			a, err := array.Concatenate(ch.Chunks(), s.mem)
			cols[i] = a
			return err
		})
	}
	workers := min(len(s.readers), runtime.GOMAXPROCS(0))
	if workers <= 1 {
		for i := range s.readers {
			read(i)
		}
	} else {
		var wg sync.WaitGroup
		next := make(chan int)
		for range workers {
			wg.Go(func() {
				for i := range next {
					read(i)
				}
			})
		}
		for i := range s.readers {
			next <- i
		}
		close(next)
		wg.Wait()
	}
	for i, err := range errs {
		if err != nil {
			for _, c := range cols {
				if c != nil {
					c.Release()
				}
			}
			return nil, s.errAt(i, fmt.Errorf("rows %d-%d: %w", s.rgStart+s.rgDone, s.rgStart+s.rgDone+n-1, unwrapAt(err, s.path)))
		}
	}
	return cols, nil
}

// unwrapAt strips a bare *Error for file (no row group, row or column) so
// that the caller can locate its cause more precisely.
func unwrapAt(err error, file string) error {
	if e, ok := err.(*Error); ok && e.File == file && e.RowGroup < 0 && e.Row < 0 && e.Column == "" {
		return e.Err
	}
	return err
}

// errAt locates err at the current row group and the given column (-1: none).
func (s *parquetSource) errAt(col int, err error) error {
	name := ""
	if col >= 0 && col < s.schema.NumFields() {
		name = s.schema.Field(col).Name
	}
	rg := s.rg
	if e, ok := err.(*Error); ok && e.File == s.path && e.RowGroup < 0 && e.Row < 0 {
		return &Error{File: s.path, RowGroup: rg, Row: -1, Column: name, Err: e.Err}
	}
	return locate(err, s.path, rg, name)
}

func (s *parquetSource) fail(col int, err error) { s.err = s.errAt(col, err) }

func (s *parquetSource) releaseBatch() {
	if s.cur != nil {
		s.cur.Release()
		s.cur = nil
	}
}

func (s *parquetSource) releaseReaders() {
	for _, r := range s.readers {
		if r != nil {
			r.Release()
		}
	}
	s.readers = nil
}

func (s *parquetSource) Close() error {
	s.releaseBatch()
	s.releaseReaders()
	if s.pf == nil {
		return nil
	}
	pf := s.pf
	s.pf = nil
	return guard(s.path, pf.Close)
}

// RowGroups reports a Parquet file's row-group row counts, for progress and
// planning. It reads only the footer.
func RowGroups(path string) ([]int64, error) {
	if f, ok := FormatOf(path); ok && f != FormatParquet {
		return nil, At(path, fmt.Errorf("row groups exist only in Parquet files, not %v", f))
	}
	var out []int64
	err := guard(path, func() error {
		pf, err := openParquetFile(path, parquet.NewReaderProperties(nil))
		if err != nil {
			return err
		}
		defer pf.Close()
		md := pf.MetaData()
		out = make([]int64, md.NumRowGroups())
		for i := range out {
			out[i] = md.RowGroup(i).NumRows()
		}
		return nil
	})
	return out, err
}
