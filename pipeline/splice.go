package pipeline

import (
	"bytes"
	"context"
	"encoding/base64"
	"encoding/binary"
	"errors"
	"fmt"
	"math"
	"os"
	"slices"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/flight"
	"github.com/apache/arrow-go/v18/arrow/memory"
	"github.com/parquet-go/parquet-go/encoding/thrift"
	"github.com/parquet-go/parquet-go/format"
)

// SpliceOptions configure a splice sink.
type SpliceOptions struct {
	Compression string         // codec of the appended columns, as in ParquetSinkOptions; "" = snappy
	Metadata    arrow.Metadata // the output's key-value metadata; the sink adds ARROW:schema when the input has one
	CreatedBy   string         // writer name for the appended columns' encoder (the footer keeps the input's)
	Alloc       memory.Allocator
	Workers     int // columns encoded at once, as in ParquetSinkOptions
	// SpillRows: a row group of more rows has its appended columns encoded
	// straight to temporary files beside the target, one per column, page
	// by page, and copied from there; smaller ones are encoded in memory.
	// 0 = DefaultSpillRows.
	SpillRows int64
}

// NewSpliceSink writes to target the Parquet file that plan describes with
// the columns of schema appended, without decoding or re-encoding the
// input's columns: row group by row group it copies each input column
// chunk's bytes as they are (dictionary page, statistics and all), encodes
// only the appended columns for that row group (with the Parquet sink, into
// memory) and copies their chunks after the input's; at the end it copies
// the input's bloom filters and column indexes, rewrites its offset indexes
// with the chunks' new offsets, and writes a footer whose schema adds the
// appended leaves. Row groups are the input's; the footer keeps the input's
// created_by, so that readers apply the same workarounds for the input
// writer's quirks to its chunks.
//
// The sink takes batches of the appended columns only, in input row order,
// exactly as many rows as the input holds. The file appears at target only
// when Close returns nil (see CreateAtomic). Memory is one row group's
// appended columns, encoded, plus the Parquet sink's buffers; above
// SpillRows rows a row group's appended columns go to temporary files
// instead, so memory is a few pages.
//
// The footer's input structs (schema elements, row groups, column chunks)
// are copied as they were encoded, only their offsets rewritten, so
// statistics absent from the input stay absent and fields this code does
// not know are kept (thrift_raw.go).
func NewSpliceSink(target string, plan *SplicePlan, schema *arrow.Schema, opt SpliceOptions) (Committer, error) {
	if opt.Alloc == nil {
		opt.Alloc = memory.DefaultAllocator
	}
	if opt.Compression == "" {
		opt.Compression = "snappy"
	}
	if opt.SpillRows <= 0 {
		opt.SpillRows = DefaultSpillRows
	}
	s := &spliceSink{target: target, plan: plan, schema: schema, opt: opt, pos: 4}
	for _, f := range schema.Fields() {
		if !flatType(f.Type) {
			return nil, At(target, fmt.Errorf("column %q: nested type %s cannot be appended", f.Name, f.Type))
		}
	}
	s.arrowSchema = s.outputArrowSchema()
	// The appended leaves as the encoder writes them, from an empty file.
	empty, err := s.encode(nil, 0)
	if err != nil {
		return nil, err
	}
	s.addSchema = empty.Schema[1:]
	s.addOrders = empty.ColumnOrders
	s.version = empty.Version
	if s.in, err = os.Open(plan.path); err != nil {
		return nil, At(plan.path, err)
	}
	if s.af, err = CreateAtomic(target); err != nil {
		s.in.Close()
		return nil, err
	}
	if _, err := s.af.Write([]byte("PAR1")); err != nil {
		s.Abort()
		return nil, err
	}
	return s, nil
}

type spliceSink struct {
	target      string
	plan        *SplicePlan
	schema      *arrow.Schema // the appended columns
	opt         SpliceOptions
	arrowSchema string // the output's ARROW:schema entry; "" = none

	in  *os.File
	af  *AtomicFile
	pos int64 // bytes written to af

	rg     int   // current row group of the input
	rgRows int64 // its rows written to w so far
	w      Committer
	buf    bytes.Buffer
	spill  []*columnSpill // per appended column, for a row group above SpillRows

	rowGroups []splicedRowGroup
	addSchema []format.SchemaElement
	addOrders []format.ColumnOrder
	version   int32

	err    error // sticky
	closed bool
}

// splicedRowGroup is an output row group as written so far: where the
// input's chunks went (their footer structs are rewritten from the input's
// bytes, thrift_raw.go) and the appended chunks' metadata, whose page
// indexes and bloom filters are placed at the end of the file.
type splicedRowGroup struct {
	numRows, totalByteSize, totalCompressed, fileOffset int64
	ordinal                                             int16
	in                                                  []chunkPlace
	added                                               []format.ColumnChunk
	addedIndex                                          []appendedChunk
}

// appendedChunk holds an appended column chunk's page indexes until the end
// of the file, the offset index already shifted to the chunk's new place.
type appendedChunk struct {
	columnIndex, offsetIndex []byte
}

func (s *spliceSink) fail(err error) error {
	if err != nil && s.err == nil {
		var pe *Error
		if !errors.As(err, &pe) {
			err = At(s.target, err)
		}
		s.err = err
	}
	return s.err
}

// Write takes the next rows' appended columns.
func (s *spliceSink) Write(ctx context.Context, rec arrow.RecordBatch) error {
	if s.err != nil {
		return s.err
	}
	if s.closed {
		return s.fail(errors.New("write after close"))
	}
	rows := s.plan.meta.RowGroups
	for off := int64(0); off < rec.NumRows(); {
		if s.rg >= len(rows) {
			return s.fail(fmt.Errorf("more rows than the %d of the input %s", s.plan.meta.NumRows, s.plan.path))
		}
		n := min(rows[s.rg].NumRows-s.rgRows, rec.NumRows()-off)
		part := rec
		if off != 0 || n != rec.NumRows() {
			part = rec.NewSlice(off, off+n)
		}
		err := s.writeRows(ctx, part)
		if part != rec {
			part.Release()
		}
		if err != nil {
			return s.fail(err)
		}
		off += n
	}
	return nil
}

func (s *spliceSink) writeRows(ctx context.Context, rec arrow.RecordBatch) error {
	rg := &s.plan.meta.RowGroups[s.rg]
	if rg.NumRows > s.opt.SpillRows {
		return s.spillRows(rec)
	}
	if s.w == nil {
		s.buf.Reset()
		w, err := NewParquetWriter(&s.buf, s.schema, s.writerOptions(rg.NumRows))
		if err != nil {
			return err
		}
		s.w = w
	}
	if err := s.w.Write(ctx, rec); err != nil {
		return err
	}
	s.rgRows += rec.NumRows()
	if s.rgRows < rg.NumRows {
		return nil
	}
	err := s.w.Close()
	s.w = nil
	if err != nil {
		return err
	}
	small, err := parseFooter(s.buf.Bytes())
	if err != nil {
		return err
	}
	return s.finishRowGroup([]*encoded{{meta: small, b: s.buf.Bytes()}})
}

// spillRows encodes rec's appended columns into the row group's temporary
// files, one per column.
func (s *spliceSink) spillRows(rec arrow.RecordBatch) error {
	rg := &s.plan.meta.RowGroups[s.rg]
	if s.spill == nil {
		for _, f := range s.schema.Fields() {
			c, err := newColumnSpill(s.target, f, s.opt.Compression, s.plan.pageIndex, s.opt.CreatedBy, s.opt.Alloc)
			if err != nil {
				s.removeSpill()
				return err
			}
			s.spill = append(s.spill, c)
		}
	}
	for k, c := range s.spill {
		if err := c.write(rec.Column(k)); err != nil {
			return fmt.Errorf("appended column %q: %w", c.field.Name, err)
		}
	}
	s.rgRows += rec.NumRows()
	if s.rgRows < rg.NumRows {
		return nil
	}
	defer s.removeSpill()
	encs := make([]*encoded, len(s.spill))
	for k, c := range s.spill {
		e, err := c.finish()
		if err != nil {
			return err
		}
		encs[k] = e
	}
	return s.finishRowGroup(encs)
}

func (s *spliceSink) removeSpill() {
	for _, c := range s.spill {
		c.remove()
	}
	s.spill = nil
}

func (s *spliceSink) writerOptions(rows int64) ParquetSinkOptions {
	return ParquetSinkOptions{
		Compression: s.opt.Compression, RowGroupRows: max(rows, 1), CreatedBy: s.opt.CreatedBy,
		Alloc: s.opt.Alloc, Workers: s.opt.Workers, NoArrowSchema: true, PageIndex: s.plan.pageIndex,
	}
}

// encode writes rec (nil: no rows) as a Parquet file of one row group into
// s.buf and returns its footer.
func (s *spliceSink) encode(rec arrow.RecordBatch, rows int64) (*format.FileMetaData, error) {
	s.buf.Reset()
	w, err := NewParquetWriter(&s.buf, s.schema, s.writerOptions(rows))
	if err != nil {
		return nil, err
	}
	if rec != nil {
		if err := w.Write(context.Background(), rec); err != nil {
			w.Abort()
			return nil, err
		}
	}
	if err := w.Close(); err != nil {
		return nil, err
	}
	return parseFooter(s.buf.Bytes())
}

// footerOf returns the thrift footer at the end of b, the tail of a Parquet
// file: the footer, its length (4 bytes, little-endian) and PAR1.
func footerOf(b []byte) ([]byte, error) {
	if len(b) < 8 || string(b[len(b)-4:]) != "PAR1" {
		return nil, errors.New("no Parquet footer: the bytes do not end with PAR1")
	}
	n := int(binary.LittleEndian.Uint32(b[len(b)-8:]))
	if n > len(b)-8 {
		return nil, fmt.Errorf("the footer claims %d bytes, %d precede its length", n, len(b)-8)
	}
	return b[len(b)-8-n : len(b)-8], nil
}

// parseFooter decodes the footer at the end of b (see footerOf), one that
// heft's own encoder wrote.
func parseFooter(b []byte) (*format.FileMetaData, error) {
	f, err := footerOf(b)
	if err != nil {
		return nil, fmt.Errorf("appended columns: %w", err)
	}
	var m format.FileMetaData
	if err := thrift.Unmarshal(&thriftCompact, f, &m); err != nil {
		return nil, fmt.Errorf("appended columns: footer: %w", err)
	}
	return &m, nil
}

// finishRowGroup writes row group s.rg: the input's chunks, then the
// appended ones from the encoder's files, in order.
func (s *spliceSink) finishRowGroup(encs []*encoded) error {
	in := &s.plan.meta.RowGroups[s.rg]
	for _, e := range encs {
		if len(e.meta.RowGroups) != 1 || e.meta.RowGroups[0].NumRows != in.NumRows {
			return fmt.Errorf("appended columns of row group %d: the encoder wrote %d row groups, not one of %d rows", s.rg, len(e.meta.RowGroups), in.NumRows)
		}
	}
	start := s.pos
	ranges := s.plan.chunks[s.rg]
	out := splicedRowGroup{
		numRows: in.NumRows, totalByteSize: in.TotalByteSize, fileOffset: start, ordinal: in.Ordinal,
		in:         make([]chunkPlace, len(ranges)),
		added:      make([]format.ColumnChunk, 0, len(s.addSchema)),
		addedIndex: make([]appendedChunk, 0, len(s.addSchema)),
	}
	if s.rg <= math.MaxInt16 {
		out.ordinal = int16(s.rg) // what the ordinal means; writers that leave it out decode as 0
	}
	// Chunks that follow each other in the input are copied in one go.
	for j := 0; j < len(ranges); {
		k := j + 1
		for k < len(ranges) && ranges[k].off == ranges[k-1].end() {
			k++
		}
		span := byteRange{ranges[j].off, ranges[k-1].end() - ranges[j].off}
		if err := s.af.CopyFrom(s.in, span.off, span.n); err != nil {
			return err
		}
		for c := j; c < k; c++ {
			out.in[c].shift = s.pos - span.off
		}
		s.pos += span.n
		j = k
	}
	for _, e := range encs {
		for _, c := range e.meta.RowGroups[0].Columns {
			md := &c.MetaData
			r := byteRange{md.DataPageOffset, md.TotalCompressedSize}
			if d := md.DictionaryPageOffset; d > 0 && d < r.off {
				r.off = d
			}
			if r.off < 4 || r.n <= 0 {
				return fmt.Errorf("appended column %v: chunk at %d+%d", []string(md.PathInSchema), r.off, r.n)
			}
			d := s.pos - r.off
			var a appendedChunk
			if c.ColumnIndexLength > 0 {
				b, err := e.read(c.ColumnIndexOffset, int64(c.ColumnIndexLength))
				if err != nil {
					return err
				}
				a.columnIndex = slices.Clone(b)
			}
			if c.OffsetIndexLength > 0 {
				b, err := e.read(c.OffsetIndexOffset, int64(c.OffsetIndexLength))
				if err != nil {
					return err
				}
				if a.offsetIndex, err = shiftOffsetIndex(b, d); err != nil {
					return err
				}
			}
			if err := e.copyTo(s.af, r.off, r.n); err != nil {
				return err
			}
			s.pos += r.n
			shiftChunk(&c, r, d)
			out.added = append(out.added, c)
			out.addedIndex = append(out.addedIndex, a)
			out.totalByteSize += md.TotalUncompressedSize
		}
	}
	if len(out.added) != len(s.addSchema) {
		return fmt.Errorf("appended columns of row group %d: %d chunks encoded for %d columns", s.rg, len(out.added), len(s.addSchema))
	}
	out.totalCompressed = s.pos - start
	s.rowGroups = append(s.rowGroups, out)
	s.rg++
	s.rgRows = 0
	return nil
}

// shiftChunk moves an appended column chunk's offsets by d bytes (the chunk
// was at r in the encoder's file) and clears its page index places, set at
// the end. The input's chunks are moved in their own bytes instead
// (rewriteColumnChunk).
func shiftChunk(c *format.ColumnChunk, r byteRange, d int64) {
	md := &c.MetaData
	md.DataPageOffset += d
	if md.DictionaryPageOffset > 0 {
		md.DictionaryPageOffset += d
	}
	if md.IndexPageOffset > 0 {
		md.IndexPageOffset += d
	}
	// file_offset is deprecated and writers disagree on it (the first page,
	// or where inline metadata would follow the chunk); keep it relative.
	if c.FileOffset >= r.off && c.FileOffset <= r.end() {
		c.FileOffset += d
	} else {
		c.FileOffset = r.off + d
	}
	c.ColumnIndexOffset, c.ColumnIndexLength = 0, 0
	c.OffsetIndexOffset, c.OffsetIndexLength = 0, 0
}

// shiftOffsetIndex returns the offset index in b with every page moved by d
// bytes.
func shiftOffsetIndex(b []byte, d int64) ([]byte, error) {
	var ix format.OffsetIndex
	if err := checkThriftSizes(b); err != nil {
		return nil, fmt.Errorf("offset index: %w", err)
	}
	if err := thrift.Unmarshal(&thriftCompact, b, &ix); err != nil {
		return nil, fmt.Errorf("offset index: %w", err)
	}
	return marshalShifted(&ix, d)
}

// marshalShifted encodes a copy of ix with every page moved by d bytes. An
// offset index has only required fields and lists, so parquet-go's
// structures hold all of it.
func marshalShifted(ix *format.OffsetIndex, d int64) ([]byte, error) {
	c := *ix
	c.PageLocations = slices.Clone(ix.PageLocations)
	for i := range c.PageLocations {
		c.PageLocations[i].Offset += d
	}
	return thrift.Marshal(&thriftCompact, &c)
}

// Close writes the page indexes and the footer, then commits the file.
func (s *spliceSink) Close() error {
	if s.closed {
		return s.err
	}
	s.closed = true
	if s.err == nil && s.rg != len(s.plan.meta.RowGroups) {
		var got int64
		for _, rg := range s.plan.meta.RowGroups[:s.rg] {
			got += rg.NumRows
		}
		s.fail(fmt.Errorf("got %d rows for the %d of the input %s", got+s.rgRows, s.plan.meta.NumRows, s.plan.path))
	}
	if s.err == nil {
		s.fail(s.finish())
	}
	if s.err != nil {
		s.abort()
		return s.err
	}
	s.in.Close()
	if err := s.af.Commit(); err != nil {
		return s.fail(err)
	}
	return nil
}

// finish writes what follows the row groups: bloom filters, column indexes,
// offset indexes (in the order Parquet writers put them) and the footer.
func (s *spliceSink) finish() error {
	copyIn := func(r byteRange) (int64, error) {
		at := s.pos
		if err := s.af.CopyFrom(s.in, r.off, r.n); err != nil {
			return 0, err
		}
		s.pos += r.n
		return at, nil
	}
	write := func(b []byte) (int64, error) {
		at := s.pos
		if _, err := s.af.Write(b); err != nil {
			return 0, err
		}
		s.pos += int64(len(b))
		return at, nil
	}
	var err error
	for i := range s.rowGroups {
		for j, b := range s.plan.blooms[i] {
			if b.n > 0 {
				if s.rowGroups[i].in[j].bloom, err = copyIn(b); err != nil {
					return err
				}
			}
		}
	}
	for i := range s.rowGroups {
		rg := &s.rowGroups[i]
		for j, c := range s.plan.meta.RowGroups[i].Columns {
			if n := int64(c.ColumnIndexLength); n > 0 {
				if rg.in[j].columnIndex.off, err = copyIn(byteRange{c.ColumnIndexOffset, n}); err != nil {
					return err
				}
				rg.in[j].columnIndex.n = n
			}
		}
		for k, a := range rg.addedIndex {
			if len(a.columnIndex) > 0 {
				if rg.added[k].ColumnIndexOffset, err = write(a.columnIndex); err != nil {
					return err
				}
				rg.added[k].ColumnIndexLength = int32(len(a.columnIndex))
			}
		}
	}
	for i := range s.rowGroups {
		rg := &s.rowGroups[i]
		for j, ix := range s.plan.offsetIndexes[i] {
			if ix == nil {
				continue
			}
			b, err := marshalShifted(ix, rg.in[j].shift)
			if err != nil {
				return At(s.plan.path, fmt.Errorf("row group %d column %d: %w", i, j, err))
			}
			if rg.in[j].offsetIdx.off, err = write(b); err != nil {
				return err
			}
			rg.in[j].offsetIdx.n = int64(len(b))
		}
		for k, a := range rg.addedIndex {
			if len(a.offsetIndex) > 0 {
				if rg.added[k].OffsetIndexOffset, err = write(a.offsetIndex); err != nil {
					return err
				}
				rg.added[k].OffsetIndexLength = int32(len(a.offsetIndex))
			}
		}
	}
	footer, err := s.footer()
	if err != nil {
		return fmt.Errorf("footer: %w", err)
	}
	footer = binary.LittleEndian.AppendUint32(footer, uint32(len(footer)))
	footer = append(footer, "PAR1"...)
	_, err = write(footer)
	return err
}

// footer encodes the output's footer: the input's, struct by struct as it
// was written (see thrift_raw.go), with the appended leaves, column chunks
// and column orders added, every input chunk's offsets moved, the row
// groups' totals set and the output's key-value metadata. The version is
// the larger of the input's and the appended encoder's; created_by stays
// the input's.
func (s *spliceSink) footer() ([]byte, error) {
	in, b := s.plan, s.plan.raw
	nIn := in.leaves
	marshal := func(v any) ([]byte, error) { return thrift.Marshal(&thriftCompact, v) }

	schema := make([][]byte, 0, len(in.schemaEls)+len(s.addSchema))
	root, err := rewriteStruct(b, in.schemaEls[0][0], func(w *rawWriter, f rawField) (bool, error) {
		if f.id != 5 {
			return false, nil
		}
		n, err := rawI64(b, f)
		if err != nil {
			return false, err
		}
		w.int(5, ctI32, n+int64(len(s.addSchema)))
		return true, nil
	}, nil)
	if err != nil {
		return nil, err
	}
	schema = append(schema, root)
	for _, el := range in.schemaEls[1:] {
		schema = append(schema, b[el[0]:el[1]])
	}
	for i := range s.addSchema {
		e, err := marshal(&s.addSchema[i])
		if err != nil {
			return nil, err
		}
		schema = append(schema, e)
	}

	rgs := make([][]byte, len(s.rowGroups))
	for i := range s.rowGroups {
		if rgs[i], err = s.rowGroupBytes(i); err != nil {
			return nil, fmt.Errorf("row group %d: %w", i, err)
		}
	}

	kv := make([][]byte, 0, s.opt.Metadata.Len()+1)
	addKV := func(k, v string) {
		var w rawWriter
		w.binary(1, k)
		w.binary(2, v)
		kv = append(kv, w.end())
	}
	for i, k := range s.opt.Metadata.Keys() {
		addKV(k, s.opt.Metadata.Values()[i])
	}
	if s.arrowSchema != "" {
		addKV(arrowSchemaKey, s.arrowSchema)
	}

	var w rawWriter
	wroteKV := false
	writeKV := func() {
		if !wroteKV && len(kv) > 0 {
			w.list(5, ctStruct, kv)
		}
		wroteKV = true
	}
	for _, f := range in.rootFields {
		if f.id > 5 {
			writeKV()
		}
		switch f.id {
		case 1:
			w.int(1, ctI32, int64(max(in.meta.Version, s.version)))
		case 2:
			w.list(2, ctStruct, schema)
		case 4:
			w.list(4, ctStruct, rgs)
		case 5:
			writeKV()
		case 7:
			_, els, err := rawList(b, f.start)
			if err != nil {
				return nil, err
			}
			if len(els) != nIn {
				// Not one order per leaf (an empty list, say): the input's
				// field as it was, rather than orders paired with the wrong
				// columns.
				w.raw(f.id, f.typ, b[f.start:f.end])
				continue
			}
			orders := make([][]byte, 0, len(els)+len(s.addSchema))
			for _, e := range els {
				orders = append(orders, b[e[0]:e[1]])
			}
			for k := range s.addSchema {
				o := format.ColumnOrder{Value: &format.TypeDefinedOrder{}}
				if k < len(s.addOrders) {
					o = s.addOrders[k]
				}
				e, err := marshal(&o)
				if err != nil {
					return nil, err
				}
				orders = append(orders, e)
			}
			w.list(7, ctStruct, orders)
		case 3:
			if !in.sliced {
				w.raw(f.id, f.typ, b[f.start:f.end])
				break
			}
			w.int(3, ctI64, in.meta.NumRows)
		default: // created_by, and fields this code does not know
			w.raw(f.id, f.typ, b[f.start:f.end])
		}
	}
	writeKV()
	return w.end(), nil
}

// rowGroupBytes encodes output row group i: the input's RowGroup with its
// column chunks moved and the appended chunks after them.
func (s *spliceSink) rowGroupBytes(i int) ([]byte, error) {
	in, b := s.plan, s.plan.raw
	out := &s.rowGroups[i]
	cols := make([][]byte, 0, len(out.in)+len(out.added))
	for j, sp := range in.chunkSpans[i] {
		e, err := rewriteColumnChunk(b, sp[0], in.chunks[i][j], out.in[j])
		if err != nil {
			return nil, fmt.Errorf("column %d: %w", j, err)
		}
		cols = append(cols, e)
	}
	for k := range out.added {
		e, err := thrift.Marshal(&thriftCompact, &out.added[k])
		if err != nil {
			return nil, err
		}
		cols = append(cols, e)
	}
	fields, _, err := rawStruct(b, in.rgSpans[i][0])
	if err != nil {
		return nil, err
	}
	var w rawWriter
	w.list(1, ctStruct, cols)
	w.int(2, ctI64, out.totalByteSize)
	w.int(3, ctI64, out.numRows)
	if f, ok := fieldOf(fields, 4); ok {
		w.raw(4, f.typ, b[f.start:f.end]) // sorting columns
	}
	w.int(5, ctI64, out.fileOffset)
	w.int(6, ctI64, out.totalCompressed)
	w.int(7, ctI16, int64(out.ordinal))
	for _, f := range fields {
		if f.id > 7 {
			w.raw(f.id, f.typ, b[f.start:f.end])
		}
	}
	return w.end(), nil
}

// outputArrowSchema returns the ARROW:schema entry of the output: the
// input's entry, when it has one, with the appended fields added, so that
// Arrow readers restore the input's types as before. Without one in the
// input the output has none either: readers derive every type from the
// Parquet schema, as they did for the input.
func (s *spliceSink) outputArrowSchema() string {
	sc := s.plan.arrowSchema
	if sc == nil {
		return ""
	}
	fields := append(slices.Clone(sc.Fields()), s.schema.Fields()...)
	md := sc.Metadata()
	out := arrow.NewSchema(fields, &md)
	return base64.StdEncoding.EncodeToString(flight.SerializeSchema(out, s.opt.Alloc))
}

// Abort drops the output and leaves the target untouched.
func (s *spliceSink) Abort() error {
	if s.closed && s.err == nil {
		return nil // committed
	}
	s.closed = true
	if s.err == nil {
		s.err = At(s.target, errors.New("aborted"))
	}
	return s.abort()
}

func (s *spliceSink) abort() error {
	if s.w != nil {
		s.w.Abort()
		s.w = nil
	}
	s.removeSpill()
	if s.in != nil {
		s.in.Close()
	}
	if s.af != nil {
		return s.af.Abort()
	}
	return nil
}
