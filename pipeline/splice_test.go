package pipeline

import (
	"bytes"
	"context"
	"encoding/binary"
	"errors"
	"fmt"
	"math/rand/v2"
	"os"
	"path/filepath"
	"reflect"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"
	"github.com/apache/arrow-go/v18/parquet"
	"github.com/apache/arrow-go/v18/parquet/compress"
	"github.com/apache/arrow-go/v18/parquet/file"
	"github.com/apache/arrow-go/v18/parquet/pqarrow"
	pq "github.com/parquet-go/parquet-go"
	"github.com/parquet-go/parquet-go/encoding/thrift"
	"github.com/parquet-go/parquet-go/format"
)

// appendedSchema is the shape of heft's appended columns.
var appendedSchema = arrow.NewSchema([]arrow.Field{
	{Name: "propensity", Type: arrow.PrimitiveTypes.Float64},
	{Name: "weight", Type: arrow.PrimitiveTypes.Float64, Nullable: true},
	{Name: "in_support", Type: arrow.FixedWidthTypes.Boolean},
}, nil)

// appendedBatch is the appended columns of rows [start, start+n).
func appendedBatch(mem memory.Allocator, start, n int64) arrow.RecordBatch {
	b := array.NewRecordBuilder(mem, appendedSchema)
	defer b.Release()
	for i := start; i < start+n; i++ {
		b.Field(0).(*array.Float64Builder).Append(float64(i%97+1) / 99)
		if i%7 == 2 {
			b.Field(1).AppendNull()
		} else {
			b.Field(1).(*array.Float64Builder).Append(1 + float64(i%31)/3)
		}
		b.Field(2).(*array.BooleanBuilder).Append(i%5 != 0)
	}
	return b.NewRecordBatch()
}

// spliceFixture writes an input file of the given shape and says how many
// rows it has and whether it has page indexes.
type spliceFixture struct {
	name      string
	write     func(t *testing.T, path string) (rows int64)
	pageIndex bool
	bloom     bool // has a bloom filter on column "name"
	flat      bool // heft's own sink can write its columns, for the re-encoding comparison
	// renamed appends the columns under other names, for an input that has
	// heft's names already.
	renamed bool
}

// renamedSchema is appendedSchema under other names.
var renamedSchema = arrow.NewSchema([]arrow.Field{
	{Name: "propensity_2", Type: arrow.PrimitiveTypes.Float64},
	{Name: "weight_2", Type: arrow.PrimitiveTypes.Float64, Nullable: true},
	{Name: "in_support_2", Type: arrow.FixedWidthTypes.Boolean},
}, nil)

var nestedSchema = arrow.NewSchema([]arrow.Field{
	{Name: "id", Type: arrow.PrimitiveTypes.Int64},
	{Name: "tags", Type: arrow.ListOf(arrow.BinaryTypes.String), Nullable: true},
	{Name: "pos", Type: arrow.StructOf(
		arrow.Field{Name: "x", Type: arrow.PrimitiveTypes.Float64, Nullable: true},
		arrow.Field{Name: "label", Type: arrow.BinaryTypes.String},
	), Nullable: true},
	{Name: "at", Type: &arrow.TimestampType{Unit: arrow.Microsecond, TimeZone: "UTC"}, Nullable: true},
}, nil)

func nestedBatch(mem memory.Allocator, start, n int64) arrow.RecordBatch {
	b := array.NewRecordBuilder(mem, nestedSchema)
	defer b.Release()
	lb := b.Field(1).(*array.ListBuilder)
	vb := lb.ValueBuilder().(*array.StringBuilder)
	sb := b.Field(2).(*array.StructBuilder)
	t0 := time.Date(2026, 3, 1, 0, 0, 0, 0, time.UTC).UnixMicro()
	for i := start; i < start+n; i++ {
		b.Field(0).(*array.Int64Builder).Append(i)
		if i%9 == 4 {
			lb.AppendNull()
		} else {
			lb.Append(true)
			for k := int64(0); k < i%4; k++ {
				vb.Append(fmt.Sprintf("t%d", (i+k)%6))
			}
		}
		if i%11 == 5 {
			sb.AppendNull()
		} else {
			sb.Append(true)
			if i%3 == 0 {
				sb.FieldBuilder(0).AppendNull()
			} else {
				sb.FieldBuilder(0).(*array.Float64Builder).Append(float64(i) / 8)
			}
			sb.FieldBuilder(1).(*array.StringBuilder).Append(fmt.Sprintf("p%d", i%5))
		}
		if i%13 == 0 {
			b.Field(3).AppendNull()
		} else {
			b.Field(3).(*array.TimestampBuilder).Append(arrow.Timestamp(t0 + i*1_000_000))
		}
	}
	return b.NewRecordBatch()
}

// writeWithPqarrow writes rows in batches of 700 with arrow-go's own file
// writer and the given properties.
func writeWithPqarrow(t *testing.T, path string, sc *arrow.Schema, batch func(memory.Allocator, int64, int64) arrow.RecordBatch, rows int64, props ...parquet.WriterProperty) {
	t.Helper()
	f, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	w, err := pqarrow.NewFileWriter(sc, f, parquet.NewWriterProperties(props...), pqarrow.NewArrowWriterProperties(pqarrow.WithStoreSchema()))
	if err != nil {
		t.Fatal(err)
	}
	for start := int64(0); start < rows; start += 700 {
		rec := batch(memory.DefaultAllocator, start, min(700, rows-start))
		err := w.WriteBuffered(rec)
		rec.Release()
		if err != nil {
			t.Fatal(err)
		}
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
}

// pgRow is a row of the fixture parquet-go writes: optional, repeated and
// dictionary columns, a bloom filter on name.
type pgRow struct {
	ID    int64    `parquet:"id"`
	Name  string   `parquet:"name,dict"`
	Score *float64 `parquet:"score,optional"`
	Tags  []int32  `parquet:"tags"`
	Note  *string  `parquet:"note,optional"`
}

func writeWithParquetGo(t *testing.T, path string, rows int64) {
	t.Helper()
	f, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	w := pq.NewGenericWriter[pgRow](f, pq.MaxRowsPerRowGroup(800), pq.PageBufferSize(2048),
		pq.BloomFilters(pq.SplitBlockFilter(10, "name")), pq.Compression(&pq.Snappy),
		pq.KeyValueMetadata("origin", "a parquet-go fixture"))
	batch := make([]pgRow, 0, 100)
	for i := int64(0); i < rows; i++ {
		r := pgRow{ID: i * 3, Name: fmt.Sprintf("n%d", i%40)}
		if i%4 != 1 {
			v := float64(i) * 0.25
			r.Score = &v
		}
		for k := int64(0); k < i%3; k++ {
			r.Tags = append(r.Tags, int32(i+k))
		}
		if i%6 == 0 {
			s := fmt.Sprintf("note %d", i)
			r.Note = &s
		}
		batch = append(batch, r)
		if len(batch) == cap(batch) || i == rows-1 {
			if _, err := w.Write(batch); err != nil {
				t.Fatal(err)
			}
			batch = batch[:0]
		}
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
}

func spliceFixtures() []spliceFixture {
	flatPq := func(rows int64, props ...parquet.WriterProperty) func(*testing.T, string) int64 {
		return func(t *testing.T, path string) int64 {
			writeWithPqarrow(t, path, sinkSchema, testBatch, rows, props...)
			return rows
		}
	}
	return []spliceFixture{
		{name: "pqarrow snappy dictionary statistics", flat: true, write: flatPq(3500,
			parquet.WithCompression(compress.Codecs.Snappy), parquet.WithMaxRowGroupLength(1000))},
		{name: "pqarrow zstd plain pages v2 page index", flat: true, pageIndex: true, write: flatPq(3100,
			parquet.WithCompression(compress.Codecs.Zstd), parquet.WithDictionaryDefault(false),
			parquet.WithDataPageVersion(parquet.DataPageV2), parquet.WithDataPageSize(512),
			parquet.WithPageIndexEnabled(true), parquet.WithMaxRowGroupLength(1500))},
		{name: "pqarrow uncompressed no statistics one row group", flat: true, write: flatPq(900,
			parquet.WithCompression(compress.Codecs.Uncompressed), parquet.WithStats(false))},
		{name: "pqarrow nested and repeated with page index", pageIndex: true, write: func(t *testing.T, path string) int64 {
			writeWithPqarrow(t, path, nestedSchema, nestedBatch, 2500, parquet.WithMaxRowGroupLength(1000),
				parquet.WithPageIndexEnabled(true), parquet.WithDataPageSize(1024), parquet.WithCompression(compress.Codecs.Snappy))
			return 2500
		}},
		{name: "parquet-go repeated optional bloom filter page index", pageIndex: true, bloom: true, write: func(t *testing.T, path string) int64 {
			writeWithParquetGo(t, path, 2000)
			return 2000
		}},
		{name: "heft sink many row groups", flat: true, write: func(t *testing.T, path string) int64 {
			s, err := NewParquetSink(path, sinkSchema, ParquetSinkOptions{RowGroupRows: 256})
			if err != nil {
				t.Fatal(err)
			}
			for start := int64(0); start < 3000; start += 1000 {
				rec := testBatch(memory.DefaultAllocator, start, 1000)
				err := s.Write(context.Background(), rec)
				rec.Release()
				if err != nil {
					t.Fatal(err)
				}
			}
			if err := s.Close(); err != nil {
				t.Fatal(err)
			}
			return 3000
		}},
		{name: "zero rows", flat: true, write: flatPq(0)},
		// Written by DuckDB 1.5 (testdata/README.md has the command): another
		// writer's layout, with DuckDB's own propensity and weight columns.
		{name: "duckdb", flat: true, renamed: true, write: func(t *testing.T, path string) int64 {
			b, err := os.ReadFile(filepath.Join("..", "testdata", "splice", "duckdb.parquet"))
			if err != nil {
				t.Fatal(err)
			}
			if err := os.WriteFile(path, b, 0o644); err != nil {
				t.Fatal(err)
			}
			return 6000
		}},
	}
}

// splice writes the appended columns of rows rows to out from in, in
// batches of 333 rows, which cross row group boundaries.
func splice(t *testing.T, in, out string, rows int64, schema *arrow.Schema) {
	t.Helper()
	spliceWith(t, in, out, rows, schema, SpliceOptions{})
}

// spliceWith is splice with options (the metadata and allocator are the
// test's).
func spliceWith(t *testing.T, in, out string, rows int64, schema *arrow.Schema, opt SpliceOptions) {
	t.Helper()
	plan, err := PlanSplice(in)
	if err != nil {
		t.Fatal(err)
	}
	splicePlanned(t, plan, out, 0, rows, schema, opt)
}

// splicePlanned splices plan to out, appending rows [start, start+rows) of
// appendedBatch in batches of 333 rows.
func splicePlanned(t *testing.T, plan *SplicePlan, out string, start, rows int64, schema *arrow.Schema, opt SpliceOptions) {
	t.Helper()
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	opt.Metadata, opt.Alloc = arrow.NewMetadata([]string{"heft.test"}, []string{"yes"}), mem
	s, err := NewSpliceSink(out, plan, schema, opt)
	if err != nil {
		t.Fatal(err)
	}
	for off := int64(0); off < rows; off += 333 {
		app := appendedBatch(mem, start+off, min(333, rows-off))
		rec := array.NewRecordBatch(schema, app.Columns(), app.NumRows())
		app.Release()
		err := s.Write(context.Background(), rec)
		rec.Release()
		if err != nil {
			s.Abort()
			t.Fatal(err)
		}
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
}

func readTable(t *testing.T, path string) arrow.Table {
	t.Helper()
	pf, err := file.OpenParquetFile(path, false)
	if err != nil {
		t.Fatalf("pqarrow cannot open %s: %v", path, err)
	}
	defer pf.Close()
	fr, err := pqarrow.NewFileReader(pf, pqarrow.ArrowReadProperties{BatchSize: 1 << 20}, memory.DefaultAllocator)
	if err != nil {
		t.Fatal(err)
	}
	tbl, err := fr.ReadTable(context.Background())
	if err != nil {
		t.Fatalf("pqarrow cannot read %s: %v", path, err)
	}
	return tbl
}

func readFooter(t *testing.T, b []byte) *format.FileMetaData {
	t.Helper()
	m, err := parseFooter(b)
	if err != nil {
		t.Fatal(err)
	}
	return m
}

// TestSpliceFixtures splices every fixture and checks the output against the
// input with both Parquet libraries: the input's columns hold the same
// values (and the same bytes), the appended ones the values written, page
// indexes still find their pages, and a rerun gives the same bytes.
func TestSpliceFixtures(t *testing.T) {
	for _, fx := range append(append(spliceFixtures(), extraFixtures()...), mangledFixtures()...) {
		t.Run(fx.name, func(t *testing.T) {
			dir := t.TempDir()
			in, out := filepath.Join(dir, "in.parquet"), filepath.Join(dir, "out.parquet")
			rows := fx.write(t, in)
			inBytes, _ := os.ReadFile(in)
			schema := appendedSchema
			if fx.renamed {
				schema = renamedSchema
			}
			splice(t, in, out, rows, schema)
			outBytes, err := os.ReadFile(out)
			if err != nil {
				t.Fatal(err)
			}
			if after, _ := os.ReadFile(in); !bytes.Equal(after, inBytes) {
				t.Fatal("splicing changed the input")
			}

			// Arrow side: the input's columns unchanged, the appended ones as written.
			tin, tout := readTable(t, in), readTable(t, out)
			defer tin.Release()
			defer tout.Release()
			nIn := int(tin.NumCols())
			if tout.NumRows() != rows || int(tout.NumCols()) != nIn+3 {
				t.Fatalf("output has %d rows × %d columns, want %d × %d", tout.NumRows(), tout.NumCols(), rows, nIn+3)
			}
			for i := 0; i < nIn; i++ {
				fi, fo := tin.Schema().Field(i), tout.Schema().Field(i)
				if fi.Name != fo.Name || !arrow.TypeEqual(fi.Type, fo.Type) || fi.Nullable != fo.Nullable {
					t.Fatalf("column %d: %v in, %v out", i, fi, fo)
				}
				if !array.ChunkedEqual(tin.Column(i).Data(), tout.Column(i).Data()) {
					t.Fatalf("column %q differs after splicing", fi.Name)
				}
			}
			want := appendedBatch(memory.DefaultAllocator, 0, rows)
			defer want.Release()
			for k := 0; k < 3; k++ {
				got := tout.Column(nIn + k)
				if got.Name() != schema.Field(k).Name {
					t.Fatalf("appended column %d is %q", k, got.Name())
				}
				wc := arrow.NewChunked(want.Column(k).DataType(), []arrow.Array{want.Column(k)})
				if !array.ChunkedEqual(wc, got.Data()) {
					t.Fatalf("appended column %q differs", got.Name())
				}
				wc.Release()
			}
			// Byte identity of every input chunk.
			min, mout := readFooter(t, inBytes), readFooter(t, outBytes)
			if kv := mout.KeyValueMetadata; len(kv) == 0 || kv[0].Key != "heft.test" {
				t.Fatalf("output lacks the key-value metadata given: %v", kv)
			}
			if len(mout.RowGroups) != len(min.RowGroups) {
				t.Fatalf("%d row groups out, %d in", len(mout.RowGroups), len(min.RowGroups))
			}
			if mout.CreatedBy != min.CreatedBy {
				t.Fatalf("created_by %q, want the input's %q", mout.CreatedBy, min.CreatedBy)
			}
			for i := range min.RowGroups {
				for j, c := range min.RowGroups[i].Columns {
					o := mout.RowGroups[i].Columns[j]
					if !bytes.Equal(chunkBytes(inBytes, &c), chunkBytes(outBytes, &o)) {
						t.Fatalf("row group %d column %v: the chunk's bytes changed", i, c.MetaData.PathInSchema)
					}
					if (c.MetaData.BloomFilterOffset > 0) != (o.MetaData.BloomFilterOffset > 0) {
						t.Fatalf("row group %d column %v: bloom filter lost", i, c.MetaData.PathInSchema)
					}
				}
			}

			checkWithParquetGo(t, in, out, fx.pageIndex)
			if fx.pageIndex {
				checkSeekWithArrow(t, in, out, rows)
			}
			checkFooterFaithful(t, min, mout)
			if fx.bloom {
				checkBloom(t, out, mout)
			}

			again := filepath.Join(dir, "again.parquet")
			splice(t, in, again, rows, schema)
			if b, _ := os.ReadFile(again); !bytes.Equal(b, outBytes) {
				t.Fatal("a second splice wrote different bytes")
			}

			// Row groups above SpillRows have their appended columns encoded
			// to temporary files page by page: the same values, the same
			// input bytes, working page indexes, nothing left behind.
			spilled := filepath.Join(dir, "spilled.parquet")
			spliceWith(t, in, spilled, rows, schema, SpliceOptions{SpillRows: 100})
			tsp := readTable(t, spilled)
			defer tsp.Release()
			for i := 0; i < int(tout.NumCols()); i++ {
				if !sameValues(t, tout.Column(i).Data(), tsp.Column(i).Data()) {
					t.Fatalf("column %q: spilled and in-memory splices differ", tout.Schema().Field(i).Name)
				}
			}
			sb := mustRead(t, spilled)
			msp := readFooter(t, sb)
			for i := range min.RowGroups {
				for j, c := range min.RowGroups[i].Columns {
					o := msp.RowGroups[i].Columns[j]
					if !bytes.Equal(chunkBytes(inBytes, &c), chunkBytes(sb, &o)) {
						t.Fatalf("spilled: row group %d column %v: the chunk's bytes changed", i, c.MetaData.PathInSchema)
					}
				}
			}
			checkWithParquetGo(t, in, spilled, fx.pageIndex)
			if fx.pageIndex {
				checkSeekWithArrow(t, in, spilled, rows)
			}
			spilled2 := filepath.Join(dir, "spilled2.parquet")
			spliceWith(t, in, spilled2, rows, schema, SpliceOptions{SpillRows: 100})
			if !bytes.Equal(mustRead(t, spilled2), sb) {
				t.Fatal("a second spilled splice wrote different bytes")
			}
			for _, n := range listDir(t, dir) {
				if strings.Contains(n, tempMarker) {
					t.Fatalf("temporary file %s left behind", n)
				}
			}

			if fx.flat {
				re := filepath.Join(dir, "re.parquet")
				reencode(t, tin, re, schema)
				tre := readTable(t, re)
				defer tre.Release()
				for i := 0; i < int(tre.NumCols()); i++ {
					if !sameValues(t, tre.Column(i).Data(), tout.Column(i).Data()) {
						t.Fatalf("column %q: the spliced and the re-encoded files differ", tre.Schema().Field(i).Name)
					}
				}
				if a, b := parquetGoRows(t, out), parquetGoRows(t, re); len(a) != len(b) {
					t.Fatalf("parquet-go reads %d rows spliced, %d re-encoded", len(a), len(b))
				} else {
					for r := range a {
						if !a[r].Equal(b[r]) {
							t.Fatalf("row %d: parquet-go reads %v spliced, %v re-encoded", r, a[r], b[r])
						}
					}
				}
			}
		})
	}
}

// sameValues compares two columns value by value, so that dictionary
// columns split into different row groups (hence different dictionaries)
// compare by their values.
func sameValues(t *testing.T, a, b *arrow.Chunked) bool {
	t.Helper()
	if a.Len() != b.Len() || !arrow.TypeEqual(a.DataType(), b.DataType()) {
		return false
	}
	if a.Len() == 0 {
		return true
	}
	flat := func(c *arrow.Chunked) arrow.Array {
		arr, err := array.Concatenate(c.Chunks(), memory.DefaultAllocator)
		if err != nil {
			t.Fatal(err)
		}
		return arr
	}
	x, y := flat(a), flat(b)
	defer x.Release()
	defer y.Release()
	for i := 0; i < x.Len(); i++ {
		if x.IsNull(i) != y.IsNull(i) || x.ValueStr(i) != y.ValueStr(i) {
			return false
		}
	}
	return true
}

func chunkBytes(b []byte, c *format.ColumnChunk) []byte {
	md := &c.MetaData
	off := md.DataPageOffset
	if d := md.DictionaryPageOffset; d > 0 && d < off {
		off = d
	}
	return b[off : off+md.TotalCompressedSize]
}

// reencode writes tin's columns and the appended ones with heft's own sink:
// what the general path writes.
func reencode(t *testing.T, tin arrow.Table, path string, schema *arrow.Schema) {
	t.Helper()
	fields := append(tin.Schema().Fields(), schema.Fields()...)
	s, err := NewParquetSink(path, arrow.NewSchema(fields, nil), ParquetSinkOptions{})
	if err != nil {
		t.Fatal(err)
	}
	tr := array.NewTableReader(tin, 1000)
	defer tr.Release()
	var start int64
	for tr.Next() {
		rec := tr.RecordBatch()
		app := appendedBatch(memory.DefaultAllocator, start, rec.NumRows())
		cols := append(append([]arrow.Array{}, rec.Columns()...), app.Columns()...)
		both := array.NewRecordBatch(arrow.NewSchema(fields, nil), cols, rec.NumRows())
		err := s.Write(context.Background(), both)
		both.Release()
		app.Release()
		if err != nil {
			t.Fatal(err)
		}
		start += rec.NumRows()
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
}

// checkWithParquetGo reads both files with parquet-go, the other Parquet
// library: every row's input values are unchanged, and with page indexes,
// every page location points at a page header and seeking to a row finds it.
func checkWithParquetGo(t *testing.T, in, out string, pageIndex bool) {
	t.Helper()
	fin, fout := openParquetGo(t, in), openParquetGo(t, out)
	nIn := len(fin.Schema().Columns())
	if got := len(fout.Schema().Columns()); got != nIn+3 {
		t.Fatalf("parquet-go sees %d leaf columns, want %d", got, nIn+3)
	}
	var base int64
	for i, rgIn := range fin.RowGroups() {
		rgOut := fout.RowGroups()[i]
		a, b := rowsOf(rgIn), rowsOf(rgOut)
		if len(a) != len(b) || int64(len(a)) != rgIn.NumRows() {
			t.Fatalf("row group %d: parquet-go reads %d rows in, %d out", i, len(a), len(b))
		}
		for r := range a {
			var head pq.Row
			for _, v := range b[r] {
				if v.Column() < nIn {
					head = append(head, v)
				}
			}
			if !head.Equal(a[r]) {
				t.Fatalf("row group %d row %d: parquet-go reads %v, the input has %v", i, r, head, a[r])
			}
			if p := b[r][len(b[r])-3]; p.Column() != nIn || p.Double() != float64((base+int64(r))%97+1)/99 {
				t.Fatalf("row group %d row %d: propensity %v", i, r, p)
			}
		}
		if pageIndex && len(a) > 10 {
			k := int64(len(a)) * 2 / 3
			rows := rgOut.Rows()
			if err := rows.SeekToRow(k); err != nil {
				t.Fatalf("row group %d: seek to row %d: %v", i, k, err)
			}
			buf := make([]pq.Row, 1)
			if n, _ := rows.ReadRows(buf); n != 1 || !buf[0].Equal(b[k]) {
				t.Fatalf("row group %d: seeking to row %d found %v, want %v", i, k, buf[0], b[k])
			}
			rows.Close()
		}
		base += rgIn.NumRows()
	}
	if !pageIndex {
		return
	}
	ixIn, ixOut := fin.OffsetIndexes(), fout.OffsetIndexes()
	if len(ixOut) != len(fout.RowGroups())*(nIn+3) {
		t.Fatalf("output has %d offset indexes, want one per chunk (%d)", len(ixOut), len(fout.RowGroups())*(nIn+3))
	}
	raw, _ := os.ReadFile(out)
	for i := range fout.RowGroups() {
		for j := 0; j < nIn+3; j++ {
			ox := ixOut[i*(nIn+3)+j]
			if j < nIn {
				ix := ixIn[i*nIn+j]
				if len(ix.PageLocations) != len(ox.PageLocations) {
					t.Fatalf("row group %d column %d: %d pages indexed, want %d", i, j, len(ox.PageLocations), len(ix.PageLocations))
				}
				for p := range ix.PageLocations {
					if ix.PageLocations[p].FirstRowIndex != ox.PageLocations[p].FirstRowIndex {
						t.Fatalf("row group %d column %d page %d: first row moved", i, j, p)
					}
				}
			}
			for p, loc := range ox.PageLocations {
				var h format.PageHeader
				rd := thriftCompact.NewReaderFromBytes(raw[loc.Offset:])
				if err := thrift.NewDecoder(rd).Decode(&h); err != nil || h.CompressedPageSize+int32(rd.BytesRead()) != loc.CompressedPageSize {
					t.Fatalf("row group %d column %d page %d: no page header at offset %d (%v)", i, j, p, loc.Offset, err)
				}
			}
		}
	}
}

// openParquetGo opens path with parquet-go, for the test's duration.
func openParquetGo(t *testing.T, path string) *pq.File {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { f.Close() })
	st, err := f.Stat()
	if err != nil {
		t.Fatal(err)
	}
	pf, err := pq.OpenFile(f, st.Size())
	if err != nil {
		t.Fatalf("parquet-go cannot open %s: %v", path, err)
	}
	return pf
}

// rowsOf reads every row of a row group with parquet-go.
func rowsOf(rg pq.RowGroup) []pq.Row {
	rows := rg.Rows()
	defer rows.Close()
	var all []pq.Row
	buf := make([]pq.Row, 64)
	for {
		n, err := rows.ReadRows(buf)
		for _, r := range buf[:n] {
			all = append(all, r.Clone())
		}
		if err != nil {
			return all
		}
	}
}

// checkFooterFaithful compares the output's footer with the input's, as
// parquet-go decodes them: every input schema element, column chunk and row
// group field is the input's but for the offsets splicing moves, the root
// gains the appended leaves, and created_by and column orders are kept.
func checkFooterFaithful(t *testing.T, in, out *format.FileMetaData) {
	t.Helper()
	nIn := len(in.Schema)
	if len(out.Schema) != nIn+3 {
		t.Fatalf("output schema has %d elements, want %d", len(out.Schema), nIn+3)
	}
	rootIn, rootOut := in.Schema[0], out.Schema[0]
	nc, _ := rootIn.NumChildren.Get()
	rootIn.NumChildren.Set(nc + 3)
	if !reflect.DeepEqual(rootIn, rootOut) {
		t.Fatalf("root schema element %+v, want %+v", rootOut, rootIn)
	}
	if !reflect.DeepEqual(in.Schema[1:], out.Schema[1:nIn]) {
		t.Fatal("the input's schema elements changed")
	}
	if out.CreatedBy != in.CreatedBy || out.NumRows != in.NumRows {
		t.Fatalf("created_by %q and %d rows, want %q and %d", out.CreatedBy, out.NumRows, in.CreatedBy, in.NumRows)
	}
	if len(in.ColumnOrders) > 0 && !reflect.DeepEqual(in.ColumnOrders, out.ColumnOrders[:len(in.ColumnOrders)]) {
		t.Fatal("the input's column orders changed")
	}
	strip := func(c format.ColumnChunk) format.ColumnChunk {
		c.FileOffset, c.ColumnIndexOffset, c.OffsetIndexOffset = 0, 0, 0
		c.OffsetIndexLength = 0 // re-encoded with the new offsets
		c.MetaData.DataPageOffset, c.MetaData.DictionaryPageOffset, c.MetaData.IndexPageOffset, c.MetaData.BloomFilterOffset = 0, 0, 0, 0
		return c
	}
	for i := range in.RowGroups {
		a, b := in.RowGroups[i], out.RowGroups[i]
		if a.NumRows != b.NumRows || !reflect.DeepEqual(a.SortingColumns, b.SortingColumns) {
			t.Fatalf("row group %d: rows or sorting columns changed", i)
		}
		for j := range a.Columns {
			if x, y := strip(a.Columns[j]), strip(b.Columns[j]); !reflect.DeepEqual(x, y) {
				t.Fatalf("row group %d column %d: metadata changed beyond its offsets:\n in %+v\nout %+v", i, j, x, y)
			}
		}
		var size int64
		for _, c := range b.Columns {
			size += c.MetaData.TotalCompressedSize
		}
		if b.TotalCompressedSize != size || b.FileOffset != b.Columns[0].MetaData.DataPageOffset && b.FileOffset != b.Columns[0].MetaData.DictionaryPageOffset {
			t.Fatalf("row group %d: total_compressed_size %d (chunks %d), file_offset %d", i, b.TotalCompressedSize, size, b.FileOffset)
		}
	}
}

// parquetGoRows reads every row of a file with parquet-go.
func parquetGoRows(t *testing.T, path string) []pq.Row {
	t.Helper()
	var all []pq.Row
	for _, rg := range openParquetGo(t, path).RowGroups() {
		all = append(all, rowsOf(rg)...)
	}
	return all
}

// checkSeekWithArrow seeks with arrow-go's column readers, which use the
// offset index when there is one, to a row two thirds into every row group
// of the output, in the first input column (an int64 in every page-index
// fixture) and in the appended propensity, and compares what it reads
// with the input and with the values appended.
func checkSeekWithArrow(t *testing.T, in, out string, rows int64) {
	t.Helper()
	open := func(path string) *file.Reader {
		pf, err := file.OpenParquetFile(path, false)
		if err != nil {
			t.Fatal(err)
		}
		t.Cleanup(func() { pf.Close() })
		return pf
	}
	pin, pout := open(in), open(out)
	if pout.GetPageIndexReader() == nil {
		t.Fatal("arrow-go finds no page index in the output")
	}
	nIn := pin.MetaData().Schema.NumColumns()
	read1 := func(pf *file.Reader, rg, col int, row int64) any {
		cr, err := pf.RowGroup(rg).Column(col)
		if err != nil {
			t.Fatal(err)
		}
		if err := cr.SeekToRow(row); err != nil {
			t.Fatalf("row group %d column %d: seek to row %d: %v", rg, col, row, err)
		}
		def := make([]int16, 1)
		switch r := cr.(type) {
		case *file.Int64ColumnChunkReader:
			v := make([]int64, 1)
			if _, n, err := r.ReadBatch(1, v, def, nil); err != nil || n != 1 {
				t.Fatalf("row group %d column %d: read after seek: %d values, %v", rg, col, n, err)
			}
			return v[0]
		case *file.Float64ColumnChunkReader:
			v := make([]float64, 1)
			if _, n, err := r.ReadBatch(1, v, def, nil); err != nil || n != 1 {
				t.Fatalf("row group %d column %d: read after seek: %d values, %v", rg, col, n, err)
			}
			return v[0]
		}
		t.Fatalf("row group %d column %d: a %T, not int64 or float64", rg, col, cr)
		return nil
	}
	var base int64
	for i := 0; i < pout.NumRowGroups(); i++ {
		rgi, err := pout.GetPageIndexReader().RowGroup(i)
		if err != nil || rgi == nil {
			t.Fatalf("row group %d: arrow-go reads no page index: %v", i, err)
		}
		for _, col := range []int{0, nIn} {
			if oi, err := rgi.GetOffsetIndex(col); err != nil || oi == nil || len(oi.GetPageLocations()) == 0 {
				t.Fatalf("row group %d column %d: arrow-go reads no offset index: %v", i, col, err)
			}
		}
		n := pout.MetaData().RowGroups[i].NumRows
		k := n * 2 / 3
		if got, want := read1(pout, i, 0, k), read1(pin, i, 0, k); got != want {
			t.Fatalf("row group %d row %d: input column 0 reads %v after seeking, the input %v", i, k, got, want)
		}
		if got, want := read1(pout, i, nIn, k), float64((base+k)%97+1)/99; got != want {
			t.Fatalf("row group %d row %d: propensity reads %v after seeking, want %v", i, k, got, want)
		}
		base += n
	}
	if base != rows {
		t.Fatalf("row groups hold %d rows, want %d", base, rows)
	}
}

// checkBloom finds the bloom filter of column "name" in every row group of
// the output and asks it about a value present and one absent.
func checkBloom(t *testing.T, path string, m *format.FileMetaData) {
	t.Helper()
	pf := openParquetGo(t, path)
	col, ok := pf.Schema().Lookup("name")
	if !ok {
		t.Fatal("no column name")
	}
	for i, rg := range pf.RowGroups() {
		if m.RowGroups[i].Columns[col.ColumnIndex].MetaData.BloomFilterOffset == 0 {
			t.Fatalf("row group %d: no bloom filter on name", i)
		}
		bf := rg.ColumnChunks()[col.ColumnIndex].BloomFilter()
		if bf == nil {
			t.Fatalf("row group %d: parquet-go finds no bloom filter", i)
		}
		if ok, err := bf.Check(pq.ValueOf("n7")); err != nil || !ok {
			t.Fatalf("row group %d: bloom filter misses a present value (%v)", i, err)
		}
		misses := 0
		for k := range 50 {
			if ok, _ := bf.Check(pq.ValueOf(fmt.Sprintf("absent-%d", k))); !ok {
				misses++
			}
		}
		if misses < 40 {
			t.Fatalf("row group %d: bloom filter says yes to %d of 50 absent values", i, 50-misses)
		}
	}
}

// TestSpliceRowCount: a sink given more or fewer rows than the input holds
// fails, and leaves nothing at the target.
func TestSpliceRowCount(t *testing.T) {
	dir := t.TempDir()
	in := filepath.Join(dir, "in.parquet")
	writeWithPqarrow(t, in, sinkSchema, testBatch, 1000, parquet.WithMaxRowGroupLength(400))
	plan, err := PlanSplice(in)
	if err != nil {
		t.Fatal(err)
	}
	for _, rows := range []int64{999, 1001} {
		out := filepath.Join(dir, fmt.Sprintf("out%d.parquet", rows))
		s, err := NewSpliceSink(out, plan, appendedSchema, SpliceOptions{})
		if err != nil {
			t.Fatal(err)
		}
		rec := appendedBatch(memory.DefaultAllocator, 0, rows)
		err = s.Write(context.Background(), rec)
		rec.Release()
		if err == nil {
			err = s.Close()
		} else {
			s.Abort()
		}
		if err == nil || !strings.Contains(err.Error(), "rows") {
			t.Fatalf("%d rows: err = %v, want a row count error", rows, err)
		}
		if names := listDir(t, dir); len(names) != 1 {
			t.Fatalf("%d rows: left %v", rows, names)
		}
	}
}

// TestPlanSpliceRefuses: layouts that cannot be copied as bytes are told
// apart from broken files, so the caller can re-encode them.
func TestPlanSpliceRefuses(t *testing.T) {
	dir := t.TempDir()
	good := filepath.Join(dir, "good.parquet")
	writeWithPqarrow(t, good, sinkSchema, testBatch, 1000, parquet.WithMaxRowGroupLength(400))
	b, _ := os.ReadFile(good)
	rewrite := func(name string, edit func(m *format.FileMetaData)) string {
		var c format.FileMetaData
		if err := thrift.Unmarshal(&thriftCompact, footerBytes(b), &c); err != nil {
			t.Fatal(err)
		}
		edit(&c)
		f, err := thrift.Marshal(&thriftCompact, &c)
		if err != nil {
			t.Fatal(err)
		}
		body := b[:len(b)-8-len(footerBytes(b))]
		out := append(append([]byte{}, body...), f...)
		out = append(out, byte(len(f)), byte(len(f)>>8), byte(len(f)>>16), byte(len(f)>>24))
		out = append(out, "PAR1"...)
		p := filepath.Join(dir, name)
		if err := os.WriteFile(p, out, 0o644); err != nil {
			t.Fatal(err)
		}
		return p
	}
	encrypted := filepath.Join(dir, "encrypted.parquet")
	{
		f, _ := os.Create(encrypted)
		w := pq.NewGenericWriter[pgRow](f, pq.WithEncryption(&pq.EncryptionConfig{FooterKey: bytes.Repeat([]byte{7}, 16)}))
		if _, err := w.Write([]pgRow{{ID: 1, Name: "a"}}); err != nil {
			t.Fatal(err)
		}
		if err := w.Close(); err != nil {
			t.Fatal(err)
		}
		f.Close()
	}
	encFooter := filepath.Join(dir, "encfooter.parquet")
	{
		f, _ := os.Create(encFooter)
		w := pq.NewGenericWriter[pgRow](f, pq.WithEncryption(&pq.EncryptionConfig{FooterKey: bytes.Repeat([]byte{7}, 16), EncryptedFooter: true}))
		if _, err := w.Write([]pgRow{{ID: 1, Name: "a"}}); err != nil {
			t.Fatal(err)
		}
		if err := w.Close(); err != nil {
			t.Fatal(err)
		}
		f.Close()
	}
	cases := []struct {
		name, path, reason string
	}{
		{"size larger than the pages", rewrite("size.parquet", func(m *format.FileMetaData) {
			m.RowGroups[1].Columns[2].MetaData.TotalCompressedSize += 3
		}), "page"},
		{"value count", rewrite("count.parquet", func(m *format.FileMetaData) {
			m.RowGroups[0].Columns[0].MetaData.NumValues++
		}), "values"},
		{"chunk in another file", rewrite("external.parquet", func(m *format.FileMetaData) {
			m.RowGroups[0].Columns[1].FilePath = "elsewhere.parquet"
		}), "another file"},
		{"chunk beyond the data", rewrite("beyond.parquet", func(m *format.FileMetaData) {
			m.RowGroups[2].Columns[0].MetaData.DataPageOffset = int64(len(b))
		}), "outside the file"},
		{"encrypted columns", encrypted, "encrypted"},
		{"encrypted footer", encFooter, "encrypted"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			_, err := PlanSplice(c.path)
			var ns *NoSpliceError
			if !errors.As(err, &ns) || !strings.Contains(ns.Reason, c.reason) {
				t.Fatalf("err = %v, want a NoSpliceError saying %q", err, c.reason)
			}
		})
	}
	if _, err := PlanSplice(filepath.Join(dir, "missing.parquet")); err == nil {
		t.Fatal("a missing file planned")
	}
	notParquet := filepath.Join(dir, "x.parquet")
	os.WriteFile(notParquet, []byte("id,x\n1,2\n3,4\n"), 0o644)
	var ns *NoSpliceError
	if _, err := PlanSplice(notParquet); err == nil || errors.As(err, &ns) || !errors.Is(err, ErrMalformed) {
		t.Fatalf("not Parquet: err = %v, want ErrMalformed", err)
	}
}

// footerBytes returns the thrift footer of the Parquet file b.
func footerBytes(b []byte) []byte {
	f, err := footerOf(b)
	if err != nil {
		panic(err)
	}
	return f
}

// TestThriftSizeCheck: container and binary sizes that claim more than the
// bytes left are refused before parquet-go's decoder would allocate them.
func TestThriftSizeCheck(t *testing.T) {
	dir := t.TempDir()
	good := filepath.Join(dir, "good.parquet")
	writeWithPqarrow(t, good, sinkSchema, testBatch, 100)
	b, _ := os.ReadFile(good)
	footer := footerBytes(b)
	if err := checkThriftSizes(footer); err != nil {
		t.Fatalf("a good footer: %v", err)
	}
	cases := []struct {
		name string
		b    []byte
	}{
		// Field 1 (i32 version = 1), then field 2, a list of structs whose
		// varint size is 2^31-1.
		{"huge list", []byte{0x15, 0x02, 0x19, 0xfc, 0xff, 0xff, 0xff, 0xff, 0x07, 0x00}},
		{"huge binary", []byte{0x18, 0xff, 0xff, 0xff, 0xff, 0x0f, 'a', 0x00}},
		{"huge map", []byte{0x1b, 0xff, 0xff, 0xff, 0xff, 0x07, 0x88, 0x00}},
		{"deep", bytes.Repeat([]byte{0x1c}, 100)},
		{"truncated", footer[:len(footer)/2]},
		{"unknown type", []byte{0x1e, 0x00}},
	}
	for _, c := range cases {
		if err := checkThriftSizes(c.b); err == nil {
			t.Errorf("%s: accepted", c.name)
		}
	}
}

// FuzzPlanSplice: go test ./pipeline -run '^$' -fuzz FuzzPlanSplice -fuzztime 60s
// A damaged file must give an error, never a panic, a hang or a huge
// allocation; one that still plans must splice without panicking.
func FuzzPlanSplice(f *testing.F) {
	path := filepath.Join(f.TempDir(), "seed.parquet")
	s, err := NewParquetSink(path, sinkSchema, ParquetSinkOptions{RowGroupRows: 20, PageIndex: true})
	if err != nil {
		f.Fatal(err)
	}
	rec := testBatch(memory.DefaultAllocator, 0, 50)
	if err := s.Write(context.Background(), rec); err != nil {
		f.Fatal(err)
	}
	rec.Release()
	if err := s.Close(); err != nil {
		f.Fatal(err)
	}
	seed, err := os.ReadFile(path)
	if err != nil {
		f.Fatal(err)
	}
	f.Add(seed)
	f.Add(footerBytes(seed))
	f.Fuzz(func(t *testing.T, data []byte) {
		dir := t.TempDir()
		in := filepath.Join(dir, "in.parquet")
		if err := os.WriteFile(in, data, 0o644); err != nil {
			t.Fatal(err)
		}
		checkThriftSizes(data)
		if err := spliceAny(in, filepath.Join(dir, "out.parquet")); err != nil {
			t.Fatal(err)
		}
	})
}

// TestSpliceDamagedFiles plans and splices 400 copies of a small file, each
// with a few random bytes overwritten (seeded, so a failure repeats): every
// one gives an error or a spliced file, none a panic or a hang. The fuzz
// target explores further.
func TestSpliceDamagedFiles(t *testing.T) {
	dir := t.TempDir()
	seedPath := filepath.Join(dir, "seed.parquet")
	writeWithPqarrow(t, seedPath, sinkSchema, testBatch, 60, parquet.WithMaxRowGroupLength(20), parquet.WithPageIndexEnabled(true))
	seed, err := os.ReadFile(seedPath)
	if err != nil {
		t.Fatal(err)
	}
	r := rand.New(rand.NewPCG(20261202, 1))
	for i := range 400 {
		data := slices.Clone(seed)
		for range 1 + r.IntN(4) {
			data[r.IntN(len(data))] = byte(r.IntN(256))
		}
		in := filepath.Join(dir, fmt.Sprintf("in%d.parquet", i))
		if err := os.WriteFile(in, data, 0o644); err != nil {
			t.Fatal(err)
		}
		done := make(chan error, 1)
		go func() { done <- spliceAny(in, filepath.Join(dir, fmt.Sprintf("out%d.parquet", i))) }()
		select {
		case err := <-done:
			if err != nil {
				t.Fatalf("damaged copy %d: %v", i, err)
			}
		case <-time.After(20 * time.Second):
			t.Fatalf("damaged copy %d: no answer in 20 s", i)
		}
	}
}

// spliceAny plans in and, when it plans, splices it; it returns an error
// only for a result that is neither a proper error nor a file.
func spliceAny(in, out string) (err error) {
	defer func() {
		if r := recover(); r != nil {
			err = fmt.Errorf("panic: %v", r)
		}
	}()
	plan, err := PlanSplice(in)
	if err != nil {
		var ns *NoSpliceError
		var pe *Error
		if !errors.As(err, &ns) && !errors.As(err, &pe) {
			return fmt.Errorf("got %v (%T), want a NoSpliceError or an *Error", err, err)
		}
		return nil
	}
	var rows int64
	for _, n := range plan.RowGroupRows() {
		rows += n
	}
	if rows > 1<<16 {
		return nil
	}
	sink, err := NewSpliceSink(out, plan, appendedSchema, SpliceOptions{})
	if err != nil {
		return nil
	}
	app := appendedBatch(memory.DefaultAllocator, 0, rows)
	defer app.Release()
	if err := sink.Write(context.Background(), app); err != nil {
		sink.Abort()
		return nil
	}
	sink.Close()
	return nil
}

// chunkStatsSet reports, per column of row group 0, whether arrow-go finds
// statistics and a null count, and the count.
func chunkStatsSet(t *testing.T, path string, cols int) (set, hasNull []bool, nulls []int64) {
	t.Helper()
	pf, err := file.OpenParquetFile(path, false)
	if err != nil {
		t.Fatal(err)
	}
	defer pf.Close()
	rg := pf.MetaData().RowGroup(0)
	for j := 0; j < cols; j++ {
		cc, err := rg.ColumnChunk(j)
		if err != nil {
			t.Fatal(err)
		}
		ok, _ := cc.StatsSet()
		set = append(set, ok)
		var hn bool
		var n int64
		if ok {
			st, err := cc.Statistics()
			if err != nil {
				t.Fatal(err)
			}
			hn, n = st.HasNullCount(), st.NullCount()
		}
		hasNull, nulls = append(hasNull, hn), append(nulls, n)
	}
	return set, hasNull, nulls
}

// A file written without statistics keeps none: re-encoding the footer
// with parquet-go's structures used to write an empty Statistics with
// null_count 0 for every input chunk, telling readers that columns with
// nulls had none (an IS NULL filter could then skip their row groups). And
// with statistics, the input's are the output's.
func TestSpliceKeepsStatisticsAsTheyAre(t *testing.T) {
	for _, stats := range []bool{false, true} {
		dir := t.TempDir()
		in, out := filepath.Join(dir, "in.parquet"), filepath.Join(dir, "out.parquet")
		writeWithPqarrow(t, in, sinkSchema, testBatch, 300, parquet.WithStats(stats))
		splice(t, in, out, 300, appendedSchema)
		n := sinkSchema.NumFields()
		si, hi, ni := chunkStatsSet(t, in, n)
		so, ho, no := chunkStatsSet(t, out, n)
		for j := 0; j < n; j++ {
			if si[j] != so[j] || hi[j] != ho[j] || ni[j] != no[j] {
				t.Fatalf("statistics %v, column %d: input set=%v has-null-count=%v nulls=%d, output %v %v %d",
					stats, j, si[j], hi[j], ni[j], so[j], ho[j], no[j])
			}
		}
		// The footer's input structs are the input's bytes, offsets aside:
		// with nothing to move but offsets, the encoded chunk metadata has
		// the same length.
		mi, mo := readFooter(t, mustRead(t, in)), readFooter(t, mustRead(t, out))
		if a, b := fmt.Sprint(mi.RowGroups[0].Columns[1].MetaData.Statistics), fmt.Sprint(mo.RowGroups[0].Columns[1].MetaData.Statistics); a != b {
			t.Fatalf("statistics %v: column 1's statistics %s became %s", stats, a, b)
		}
	}
}

func mustRead(t *testing.T, path string) []byte {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	return b
}

// Footer damage that reading the data would not notice is found when
// planning, so the run re-encodes rather than failing after copying the
// whole file: a bloom filter offset past the data (which used to panic),
// and an offset index that does not decode.
func TestPlanSpliceChecksIndexesAndFilters(t *testing.T) {
	dir := t.TempDir()
	edit := func(name string, props []parquet.WriterProperty, change func(b []byte, m *format.FileMetaData) []byte) string {
		p := filepath.Join(dir, name)
		writeWithPqarrow(t, p, sinkSchema, testBatch, 300, props...)
		b := mustRead(t, p)
		var m format.FileMetaData
		if err := thrift.Unmarshal(&thriftCompact, footerBytes(b), &m); err != nil {
			t.Fatal(err)
		}
		b = change(b, &m)
		if err := os.WriteFile(p, b, 0o644); err != nil {
			t.Fatal(err)
		}
		return p
	}
	withFooter := func(b []byte, m *format.FileMetaData) []byte {
		f, err := thrift.Marshal(&thriftCompact, m)
		if err != nil {
			t.Fatal(err)
		}
		body := b[:len(b)-8-len(footerBytes(b))]
		out := append(append([]byte{}, body...), f...)
		out = binary.LittleEndian.AppendUint32(out, uint32(len(f)))
		return append(out, "PAR1"...)
	}
	bloom := edit("bloom.parquet", nil, func(b []byte, m *format.FileMetaData) []byte {
		m.RowGroups[0].Columns[0].MetaData.BloomFilterOffset = 1 << 40
		m.RowGroups[0].Columns[0].MetaData.BloomFilterLength = 0
		return withFooter(b, m)
	})
	index := edit("index.parquet", []parquet.WriterProperty{parquet.WithPageIndexEnabled(true)}, func(b []byte, m *format.FileMetaData) []byte {
		c := m.RowGroups[0].Columns[0]
		for k := c.OffsetIndexOffset; k < c.OffsetIndexOffset+int64(c.OffsetIndexLength); k++ {
			b[k] = 0xff
		}
		return b
	})
	moved := edit("moved.parquet", []parquet.WriterProperty{parquet.WithPageIndexEnabled(true)}, func(b []byte, m *format.FileMetaData) []byte {
		// A page location outside its chunk, in a well-formed index.
		c := m.RowGroups[0].Columns[0]
		var ix format.OffsetIndex
		if err := thrift.Unmarshal(&thriftCompact, b[c.OffsetIndexOffset:c.OffsetIndexOffset+int64(c.OffsetIndexLength)], &ix); err != nil {
			t.Fatal(err)
		}
		ix.PageLocations[0].Offset += 1 << 30
		nb, err := thrift.Marshal(&thriftCompact, &ix)
		if err != nil {
			t.Fatal(err)
		}
		at := int64(len(b) - 8 - len(footerBytes(b)))
		m.RowGroups[0].Columns[0].OffsetIndexOffset, m.RowGroups[0].Columns[0].OffsetIndexLength = at, int32(len(nb))
		f, err := thrift.Marshal(&thriftCompact, m)
		if err != nil {
			t.Fatal(err)
		}
		out := append(append(append([]byte{}, b[:at]...), nb...), f...)
		out = binary.LittleEndian.AppendUint32(out, uint32(len(f)))
		return append(out, "PAR1"...)
	})
	for _, c := range []struct{ path, reason string }{
		{bloom, "bloom filter"}, {index, "index"}, {moved, "outside its chunk"},
	} {
		_, err := PlanSplice(c.path)
		var ns *NoSpliceError
		if !errors.As(err, &ns) || !strings.Contains(ns.Reason, c.reason) {
			t.Errorf("%s: err = %v, want a NoSpliceError about %q", filepath.Base(c.path), err, c.reason)
		}
	}
}
