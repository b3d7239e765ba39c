package pipeline

import (
	"bytes"
	"encoding/base64"
	"encoding/binary"
	"errors"
	"fmt"
	"os"
	"slices"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/ipc"
	"github.com/parquet-go/parquet-go/encoding/thrift"
	"github.com/parquet-go/parquet-go/format"
)

// NoSpliceError says why a Parquet file cannot be spliced (see
// NewSpliceSink); the caller re-encodes it instead and can say why.
type NoSpliceError struct {
	File   string
	Reason string
}

func (e *NoSpliceError) Error() string { return e.File + ": cannot splice: " + e.Reason }

// SplicePlan is the layout of a Parquet file read from its footer and
// checked for splicing: every column chunk is a contiguous byte range of
// the file whose pages, walked header by header, add up to the chunk's
// recorded size and value count.
type SplicePlan struct {
	path      string
	size      int64
	meta      format.FileMetaData
	leaves    int
	chunks    [][]byteRange // per row group and column: the chunk's bytes
	blooms    [][]byteRange // per row group and column: the bloom filter (n = 0: none)
	pageIndex bool          // some chunk has a column or offset index
	codec     format.CompressionCodec
	oneCodec  bool // every chunk uses codec
	codecSeen bool // codec is the first chunk's
	// arrowSchema is the input's ARROW:schema entry, decoded; nil = none.
	arrowSchema *arrow.Schema
	// offsetIndexes holds each chunk's offset index, decoded and checked
	// against the chunk's bytes (nil: none).
	offsetIndexes [][]*format.OffsetIndex

	// The footer's own bytes and where its structs are in them: the splice
	// footer copies them rather than re-encoding what parquet-go decoded
	// (see thrift_raw.go).
	raw        []byte
	rootFields []rawField
	schemaEls  [][2]int   // each SchemaElement
	rgSpans    [][2]int   // each RowGroup
	chunkSpans [][][2]int // each RowGroup's ColumnChunks
	// sliced: the plan is some of the file's row groups (Slice), so the
	// footer's num_rows is the slice's rather than the input's bytes.
	sliced bool
}

type byteRange struct{ off, n int64 }

func (r byteRange) end() int64 { return r.off + r.n }

// thriftCompact is the protocol of every Parquet footer and page header.
// Its methods keep no state, so one value serves every goroutine.
var thriftCompact thrift.CompactProtocol

// PlanSplice reads path's footer and checks that its column chunks can be
// copied as bytes. A file that cannot be spliced (an encrypted footer or
// columns, chunks in other files, an empty row group, sizes that disagree
// with the pages) gives a *NoSpliceError; a file that cannot be read gives
// an *Error.
func PlanSplice(path string) (*SplicePlan, error) {
	return PlanSpliceRange(path, RowGroupRange{})
}

// PlanSpliceRange is PlanSplice(path) followed by Slice(r), but reads and
// checks the pages, indexes and bloom filters of the row groups r alone, so
// that each of the many parts of a large file reads only its own. What
// describes the whole file (its codec, whether it has page indexes) is
// taken from the whole footer, as PlanSplice does.
func PlanSpliceRange(path string, r RowGroupRange) (*SplicePlan, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, At(path, err)
	}
	defer f.Close()
	p := &SplicePlan{path: path}
	if err := p.read(f, r); err != nil {
		var ns *NoSpliceError
		if errors.As(err, &ns) {
			return nil, err
		}
		return nil, At(path, err)
	}
	return p.Slice(r)
}

// RowGroupRows returns the number of rows of each row group.
func (p *SplicePlan) RowGroupRows() []int64 {
	out := make([]int64, len(p.meta.RowGroups))
	for i, rg := range p.meta.RowGroups {
		out[i] = rg.NumRows
	}
	return out
}

// Slice returns the plan of row groups r alone (the whole plan when r is
// All): a file spliced from it holds just those row groups, its footer the
// input's but for the row groups left out, and its row groups numbered
// from 0. Everything that describes the whole file (the codec, whether
// appended columns get page indexes) stays the file's, so the row groups
// of every slice are spliced as they would be in the whole file.
func (p *SplicePlan) Slice(r RowGroupRange) (*SplicePlan, error) {
	if r.All() {
		return p, nil
	}
	if err := r.check(len(p.meta.RowGroups)); err != nil {
		return nil, At(p.path, err)
	}
	lo, hi := r.First, r.First+r.N
	q := *p
	q.meta.RowGroups = slices.Clone(p.meta.RowGroups[lo:hi])
	q.meta.NumRows = 0
	for k := range q.meta.RowGroups {
		q.meta.RowGroups[k].Ordinal = int16(k)
		q.meta.NumRows += q.meta.RowGroups[k].NumRows
	}
	q.chunks = p.chunks[lo:hi:hi]
	q.blooms = p.blooms[lo:hi:hi]
	q.offsetIndexes = p.offsetIndexes[lo:hi:hi]
	q.rgSpans = p.rgSpans[lo:hi:hi]
	q.chunkSpans = p.chunkSpans[lo:hi:hi]
	q.sliced = true
	return &q, nil
}

// Compression returns the codec every column chunk uses in the names of
// ParquetSinkOptions.Compression ("snappy", "zstd", "gzip", "none"), or ""
// when the chunks differ or use another codec. A file without row groups
// reports "".
func (p *SplicePlan) Compression() string {
	if !p.oneCodec {
		return ""
	}
	switch p.codec {
	case format.Snappy:
		return "snappy"
	case format.Zstd:
		return "zstd"
	case format.Gzip:
		return "gzip"
	case format.Uncompressed:
		return "none"
	}
	return ""
}

// skim takes what describes the whole file from a row group left out of
// the range read: its codecs and whether it has page indexes. Its place in
// the plan is held by empty entries, which Slice cuts off.
func (p *SplicePlan) skim(rg *format.RowGroup) {
	for j := range rg.Columns {
		c := &rg.Columns[j]
		p.seeCodec(c.MetaData.Codec)
		if c.ColumnIndexOffset != 0 || c.ColumnIndexLength != 0 || c.OffsetIndexOffset != 0 || c.OffsetIndexLength != 0 {
			p.pageIndex = true
		}
	}
	p.chunks = append(p.chunks, nil)
	p.blooms = append(p.blooms, nil)
	p.offsetIndexes = append(p.offsetIndexes, nil)
}

// seeCodec notes a chunk's codec for Compression.
func (p *SplicePlan) seeCodec(c format.CompressionCodec) {
	switch {
	case !p.codecSeen:
		p.codec, p.oneCodec, p.codecSeen = c, true, true
	case c != p.codec:
		p.oneCodec = false
	}
}

func (p *SplicePlan) no(format string, args ...any) error {
	return &NoSpliceError{File: p.path, Reason: fmt.Sprintf(format, args...)}
}

func (p *SplicePlan) read(f *os.File, want RowGroupRange) error {
	st, err := f.Stat()
	if err != nil {
		return err
	}
	p.size = st.Size()
	if p.size < 12 {
		return fmt.Errorf("%w: not a Parquet file: %d bytes is too small", ErrMalformed, p.size)
	}
	var tail [8]byte
	if _, err := f.ReadAt(tail[:], p.size-8); err != nil {
		return err
	}
	switch string(tail[4:]) {
	case "PAR1":
	case "PARE":
		return p.no("the footer is encrypted")
	default:
		return fmt.Errorf("%w: not a Parquet file: it does not end with PAR1", ErrMalformed)
	}
	footerLen := int64(binary.LittleEndian.Uint32(tail[:4]))
	footerAt := p.size - 8 - footerLen
	if footerLen == 0 || footerAt < 4 {
		return fmt.Errorf("%w: footer length %d does not fit a file of %d bytes", ErrMalformed, footerLen, p.size)
	}
	buf := make([]byte, footerLen)
	if _, err := f.ReadAt(buf, footerAt); err != nil {
		return err
	}
	// A signed plaintext footer has its signature after the thrift bytes.
	rd := thriftCompact.NewReaderFromBytes(buf)
	err = checkThriftSizes(buf)
	if err == nil {
		err = guard(p.path, func() error { return thrift.NewDecoder(rd).Decode(&p.meta) })
	}
	if err != nil {
		return fmt.Errorf("%w: footer: %v", ErrMalformed, err)
	}
	m := &p.meta
	if m.EncryptionAlgorithm.Value != nil || len(m.FooterSigningKeyMetadata) > 0 {
		return p.no("its columns are encrypted")
	}
	if n := len(buf) - rd.BytesRead(); n != 0 {
		return fmt.Errorf("%w: footer: %d bytes after its end", ErrMalformed, n)
	}
	if err := p.readRaw(buf); err != nil {
		return p.no("footer: %v", err)
	}
	if len(m.Schema) == 0 {
		return fmt.Errorf("%w: footer has no schema", ErrMalformed)
	}
	if _, ok := m.Schema[0].NumChildren.Get(); !ok {
		return p.no("the schema's root has no children count")
	}
	for _, el := range m.Schema[1:] {
		if n, ok := el.NumChildren.Get(); !ok || n == 0 {
			p.leaves++
		}
	}
	if n := len(m.ColumnOrders); n != 0 && n != p.leaves {
		return p.no("the footer has %d column orders for %d columns", n, p.leaves)
	}
	if err := want.check(len(m.RowGroups)); err != nil {
		return err
	}
	walker := pageWalker{f: f}
	var rows int64
	for i := range m.RowGroups {
		rg := &m.RowGroups[i]
		if rg.NumRows <= 0 {
			return p.no("row group %d has no rows", i)
		}
		if len(rg.Columns) != p.leaves {
			return fmt.Errorf("%w: row group %d has %d column chunks for %d columns", ErrMalformed, i, len(rg.Columns), p.leaves)
		}
		rows += rg.NumRows
		if !want.All() && (i < want.First || i >= want.First+want.N) {
			p.skim(rg)
			continue
		}
		chunks := make([]byteRange, len(rg.Columns))
		blooms := make([]byteRange, len(rg.Columns))
		oix := make([]*format.OffsetIndex, len(rg.Columns))
		for j := range rg.Columns {
			c := &rg.Columns[j]
			md := &c.MetaData
			col := fmt.Sprintf("row group %d column %v", i, []string(md.PathInSchema))
			switch {
			case c.FilePath != "":
				return p.no("%s is stored in another file, %s", col, c.FilePath)
			case c.CryptoMetadata.Value != nil || len(c.EncryptedColumnMetadata) > 0:
				return p.no("%s is encrypted", col)
			}
			r := byteRange{off: md.DataPageOffset, n: md.TotalCompressedSize}
			if d := md.DictionaryPageOffset; d > 0 && d < r.off {
				r.off = d
			}
			if r.off < 4 || r.n <= 0 || r.end() > footerAt {
				return p.no("%s has the byte range %d+%d, outside the file's data", col, r.off, r.n)
			}
			if err := walker.walk(r, md.NumValues); err != nil {
				return p.no("%s: %v", col, err)
			}
			chunks[j] = r
			p.seeCodec(md.Codec)
			for k, ix := range []byteRange{{c.ColumnIndexOffset, int64(c.ColumnIndexLength)}, {c.OffsetIndexOffset, int64(c.OffsetIndexLength)}} {
				if ix.off == 0 && ix.n == 0 {
					continue
				}
				if ix.off < 4 || ix.n <= 0 || ix.end() > footerAt {
					return p.no("%s has a page index at %d+%d, outside the file's data", col, ix.off, ix.n)
				}
				p.pageIndex = true
				b := make([]byte, ix.n)
				if _, err := f.ReadAt(b, ix.off); err != nil {
					return err
				}
				if err := checkThriftSizes(b); err != nil {
					return p.no("%s: page index: %v", col, err)
				}
				if k == 1 {
					if oix[j], err = decodeOffsetIndex(p.path, b, r); err != nil {
						return p.no("%s: offset index: %v", col, err)
					}
				}
			}
			if md.BloomFilterOffset > 0 {
				b, err := bloomRange(f, md.BloomFilterOffset, md.BloomFilterLength, footerAt)
				if err != nil {
					return p.no("%s: bloom filter: %v", col, err)
				}
				blooms[j] = b
			}
		}
		p.chunks = append(p.chunks, chunks)
		p.blooms = append(p.blooms, blooms)
		p.offsetIndexes = append(p.offsetIndexes, oix)
	}
	if rows != m.NumRows {
		return fmt.Errorf("%w: the footer says %d rows but its row groups hold %d", ErrMalformed, m.NumRows, rows)
	}
	for _, kv := range m.KeyValueMetadata {
		if kv.Key == arrowSchemaKey {
			sc, err := decodeArrowSchemaEntry(p.path, kv.Value)
			if err != nil {
				return p.no("its %s entry: %v", arrowSchemaKey, err)
			}
			p.arrowSchema = sc
		}
	}
	return nil
}

// decodeArrowSchemaEntry decodes an ARROW:schema entry: an IPC stream
// holding a schema message, base64-encoded (with or without padding).
func decodeArrowSchemaEntry(file, v string) (*arrow.Schema, error) {
	b, err := base64.StdEncoding.DecodeString(v)
	if err != nil {
		if b, err = base64.RawStdEncoding.DecodeString(v); err != nil {
			return nil, err
		}
	}
	if err := checkIPCMessage(b); err != nil {
		return nil, err
	}
	var sc *arrow.Schema
	err = guard(file, func() error {
		r, err := ipc.NewReader(bytes.NewReader(b))
		if err != nil {
			return err
		}
		defer r.Release()
		sc = r.Schema()
		return nil
	})
	return sc, err
}

// decodeOffsetIndex decodes an offset index and checks that its pages lie
// in the chunk at r, in order.
func decodeOffsetIndex(file string, b []byte, r byteRange) (*format.OffsetIndex, error) {
	ix := new(format.OffsetIndex)
	if err := guard(file, func() error { return thrift.Unmarshal(&thriftCompact, b, ix) }); err != nil {
		return nil, err
	}
	prev := r.off
	for k, loc := range ix.PageLocations {
		if loc.Offset < prev || loc.CompressedPageSize <= 0 || loc.Offset+int64(loc.CompressedPageSize) > r.end() {
			return nil, fmt.Errorf("page %d at %d+%d is outside its chunk %d+%d or out of order", k, loc.Offset, loc.CompressedPageSize, r.off, r.n)
		}
		prev = loc.Offset + int64(loc.CompressedPageSize)
	}
	return ix, nil
}

// readRaw finds the structs of the footer b: the root's fields, the schema
// elements, the row groups and their column chunks, and checks that they
// agree with what parquet-go decoded.
func (p *SplicePlan) readRaw(b []byte) error {
	root, _, err := rawStruct(b, 0)
	if err != nil {
		return err
	}
	p.raw, p.rootFields = b, root
	sf, ok := fieldOf(root, 2)
	if !ok || sf.typ != ctList {
		return errors.New("no schema list")
	}
	if _, p.schemaEls, err = rawList(b, sf.start); err != nil {
		return err
	}
	if len(p.schemaEls) != len(p.meta.Schema) {
		return fmt.Errorf("%d schema elements read, %d decoded", len(p.schemaEls), len(p.meta.Schema))
	}
	rf, ok := fieldOf(root, 4)
	if !ok || rf.typ != ctList {
		return errors.New("no row group list")
	}
	if _, p.rgSpans, err = rawList(b, rf.start); err != nil {
		return err
	}
	if len(p.rgSpans) != len(p.meta.RowGroups) {
		return fmt.Errorf("%d row groups read, %d decoded", len(p.rgSpans), len(p.meta.RowGroups))
	}
	for i, sp := range p.rgSpans {
		fields, _, err := rawStruct(b, sp[0])
		if err != nil {
			return err
		}
		cf, ok := fieldOf(fields, 1)
		if !ok || cf.typ != ctList {
			return fmt.Errorf("row group %d has no column list", i)
		}
		_, cs, err := rawList(b, cf.start)
		if err != nil {
			return err
		}
		if len(cs) != len(p.meta.RowGroups[i].Columns) {
			return fmt.Errorf("row group %d: %d column chunks read, %d decoded", i, len(cs), len(p.meta.RowGroups[i].Columns))
		}
		p.chunkSpans = append(p.chunkSpans, cs)
	}
	return nil
}

// bloomRange returns the bytes of a bloom filter: length when the footer
// records it, else the header (read from the file) plus the bitset it sizes.
func bloomRange(f *os.File, off int64, length int32, limit int64) (byteRange, error) {
	if off < 4 || off >= limit {
		return byteRange{}, fmt.Errorf("offset %d is outside the file's data", off)
	}
	if length > 0 {
		r := byteRange{off, int64(length)}
		if r.end() > limit {
			return r, fmt.Errorf("byte range %d+%d is outside the file's data", off, length)
		}
		return r, nil
	}
	buf := make([]byte, min(256, limit-off))
	if _, err := f.ReadAt(buf, off); err != nil {
		return byteRange{}, err
	}
	var h format.BloomFilterHeader
	rd := thriftCompact.NewReaderFromBytes(buf)
	err := checkThriftSizes(buf)
	if err == nil {
		err = guard(f.Name(), func() error { return thrift.NewDecoder(rd).Decode(&h) })
	}
	if err != nil {
		return byteRange{}, fmt.Errorf("header: %v", err)
	}
	r := byteRange{off, int64(rd.BytesRead()) + int64(h.NumBytes)}
	if h.NumBytes <= 0 || r.end() > limit {
		return r, fmt.Errorf("header says %d bytes, which do not fit the file", h.NumBytes)
	}
	return r, nil
}

// pageWalker reads the page headers of a column chunk.
type pageWalker struct {
	f   *os.File
	buf []byte
	h   format.PageHeader
}

// maxPageHeader bounds the bytes a page header may take (statistics of
// long strings make them large); a longer one makes the walk fail, and the
// file is re-encoded rather than spliced.
const maxPageHeader = 1 << 20

// walk checks that the pages of the chunk at r fill it exactly, header
// after page body, and that its data pages hold numValues values.
func (w *pageWalker) walk(r byteRange, numValues int64) error {
	pos, end := r.off, r.end()
	var values int64
	for pos < end {
		n, err := w.header(pos, end)
		if err != nil {
			return fmt.Errorf("page header at byte %d: %v", pos, err)
		}
		h := &w.h
		if h.CompressedPageSize < 0 {
			return fmt.Errorf("page at byte %d has a negative size", pos)
		}
		if dp, ok := h.DataPageHeader.Get(); ok {
			values += int64(dp.NumValues)
		}
		if dp, ok := h.DataPageHeaderV2.Get(); ok {
			values += int64(dp.NumValues)
		}
		pos += n + int64(h.CompressedPageSize)
	}
	if pos != end {
		return fmt.Errorf("its pages end at byte %d, not at %d where its recorded size ends", pos, end)
	}
	if values != numValues {
		return fmt.Errorf("its pages hold %d values, not the %d its metadata records", values, numValues)
	}
	return nil
}

// header decodes the page header at pos into w.h and returns its length.
func (w *pageWalker) header(pos, end int64) (int64, error) {
	for window := int64(4 << 10); ; window *= 16 {
		n := min(window, end-pos)
		if int64(cap(w.buf)) < n {
			w.buf = make([]byte, n)
		}
		b := w.buf[:n]
		if _, err := w.f.ReadAt(b, pos); err != nil {
			return 0, err
		}
		w.h = format.PageHeader{}
		rd := thriftCompact.NewReaderFromBytes(b)
		err := checkThriftSizes(b)
		if err == nil {
			err = guard(w.f.Name(), func() error { return thrift.NewDecoder(rd).Decode(&w.h) })
		}
		if err == nil {
			return int64(rd.BytesRead()), nil
		}
		if n == end-pos || window >= maxPageHeader {
			return 0, err
		}
	}
}
