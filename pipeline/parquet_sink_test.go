package pipeline

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"testing"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"
	pq "github.com/parquet-go/parquet-go"
	"github.com/parquet-go/parquet-go/format"
)

var sinkSchema = arrow.NewSchema([]arrow.Field{
	{Name: "id", Type: arrow.PrimitiveTypes.Int64},
	{Name: "x", Type: arrow.PrimitiveTypes.Float64, Nullable: true},
	{Name: "k", Type: arrow.PrimitiveTypes.Int32, Nullable: true},
	{Name: "region", Type: arrow.BinaryTypes.String, Nullable: true},
	{Name: "treated", Type: arrow.FixedWidthTypes.Boolean, Nullable: true},
	{Name: "level", Type: &arrow.DictionaryType{IndexType: arrow.PrimitiveTypes.Int32, ValueType: arrow.BinaryTypes.String}, Nullable: true},
}, nil)

var levels = []string{"low", "mid", "high"}

// testRow is the value of each column at row i; nulls follow fixed patterns.
func testRow(i int64) (id int64, x float64, xNull bool, k int32, kNull bool, region string, rNull bool, treated, tNull bool, level string, lNull bool) {
	return i, float64(i)*0.5 - 3, i%7 == 3, int32(i % 11), i%5 == 0, fmt.Sprintf("r%d", i%13), i%17 == 0, i%3 == 0, i%19 == 0, levels[i%3], i%23 == 0
}

func testBatch(mem memory.Allocator, start, n int64) arrow.RecordBatch {
	b := array.NewRecordBuilder(mem, sinkSchema)
	defer b.Release()
	for i := start; i < start+n; i++ {
		id, x, xn, k, kn, r, rn, tr, tn, lv, ln := testRow(i)
		b.Field(0).(*array.Int64Builder).Append(id)
		if xn {
			b.Field(1).AppendNull()
		} else {
			b.Field(1).(*array.Float64Builder).Append(x)
		}
		if kn {
			b.Field(2).AppendNull()
		} else {
			b.Field(2).(*array.Int32Builder).Append(k)
		}
		if rn {
			b.Field(3).AppendNull()
		} else {
			b.Field(3).(*array.StringBuilder).Append(r)
		}
		if tn {
			b.Field(4).AppendNull()
		} else {
			b.Field(4).(*array.BooleanBuilder).Append(tr)
		}
		if ln {
			b.Field(5).AppendNull()
		} else if err := b.Field(5).(*array.BinaryDictionaryBuilder).AppendString(lv); err != nil {
			panic(err)
		}
	}
	return b.NewRecordBatch()
}

// writeTest writes rows in batches of the given sizes and returns the bytes.
func writeTest(t *testing.T, opt ParquetSinkOptions, sizes ...int64) []byte {
	t.Helper()
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	opt.Alloc = mem
	var buf bytes.Buffer
	s, err := NewParquetWriter(&buf, sinkSchema, opt)
	if err != nil {
		t.Fatal(err)
	}
	var start int64
	for _, n := range sizes {
		rec := testBatch(mem, start, n)
		err := s.Write(context.Background(), rec)
		rec.Release()
		if err != nil {
			t.Fatal(err)
		}
		start += n
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	mem.AssertSize(t, 0)
	return buf.Bytes()
}

func openPQ(t *testing.T, data []byte) *pq.File {
	t.Helper()
	f, err := pq.OpenFile(bytes.NewReader(data), int64(len(data)))
	if err != nil {
		t.Fatalf("parquet-go cannot open the output: %v", err)
	}
	return f
}

// TestParquetSinkRoundTrip reads the output back with parquet-go, a second,
// independent implementation of the format.
func TestParquetSinkRoundTrip(t *testing.T) {
	sizes := []int64{1, 999, 1000, 2500, 0, 37, 463}
	var total int64
	for _, n := range sizes {
		total += n
	}
	data := writeTest(t, ParquetSinkOptions{RowGroupRows: 1000}, sizes...)
	f := openPQ(t, data)
	if f.NumRows() != total {
		t.Fatalf("rows %d, want %d", f.NumRows(), total)
	}
	for i, rg := range f.RowGroups() {
		want := min(int64(1000), total-int64(i)*1000)
		if rg.NumRows() != want {
			t.Errorf("row group %d has %d rows, want %d", i, rg.NumRows(), want)
		}
	}
	r := pq.NewReader(bytes.NewReader(data))
	defer r.Close()
	rows := make([]pq.Row, 128)
	var i int64
	for {
		n, err := r.ReadRows(rows)
		for _, row := range rows[:n] {
			id, x, xn, k, kn, rg, rn, tr, tn, lv, ln := testRow(i)
			check := func(col int, null bool, same bool) {
				v := row[col]
				if v.IsNull() != null || (!null && !same) {
					t.Fatalf("row %d column %d: got %v", i, col, v)
				}
			}
			check(0, false, row[0].Int64() == id)
			check(1, xn, row[1].Double() == x)
			check(2, kn, row[2].Int32() == k)
			check(3, rn, string(row[3].ByteArray()) == rg)
			check(4, tn, row[4].Boolean() == tr)
			check(5, ln, string(row[5].ByteArray()) == lv)
			i++
		}
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			t.Fatal(err)
		}
	}
	if i != total {
		t.Errorf("read %d rows, want %d", i, total)
	}
}

func TestParquetSinkDeterministic(t *testing.T) {
	sizes := []int64{700, 700, 700, 5}
	a := writeTest(t, ParquetSinkOptions{RowGroupRows: 1000, Workers: 1}, sizes...)
	b := writeTest(t, ParquetSinkOptions{RowGroupRows: 1000, Workers: 4}, sizes...)
	c := writeTest(t, ParquetSinkOptions{RowGroupRows: 1000, Workers: 4}, sizes...)
	if !bytes.Equal(a, b) || !bytes.Equal(b, c) {
		t.Error("output bytes depend on the run or the worker count")
	}
}

func TestParquetSinkMetadata(t *testing.T) {
	md := arrow.NewMetadata([]string{"owner", "heft.model"}, []string{"warehouse", `{"v":1}`})
	data := writeTest(t, ParquetSinkOptions{Metadata: md, CreatedBy: "heft test"}, 10)
	f := openPQ(t, data)
	for i, k := range md.Keys() {
		if v, ok := f.Lookup(k); !ok || v != md.Values()[i] {
			t.Errorf("metadata %q = %q, %v; want %q", k, v, ok, md.Values()[i])
		}
	}
	if _, ok := f.Lookup("ARROW:schema"); !ok {
		t.Error("Arrow schema not stored")
	}
	if got := f.Metadata().CreatedBy; got != "heft test" {
		t.Errorf("created_by %q", got)
	}
	data = writeTest(t, ParquetSinkOptions{NoArrowSchema: true}, 10)
	if _, ok := openPQ(t, data).Lookup("ARROW:schema"); ok {
		t.Error("Arrow schema stored despite NoArrowSchema")
	}
}

func TestParquetSinkCompression(t *testing.T) {
	for _, tc := range []struct {
		name string
		want format.CompressionCodec
	}{
		{"", format.Snappy}, {"snappy", format.Snappy}, {"zstd", format.Zstd}, {"none", format.Uncompressed}, {"gzip", format.Gzip},
	} {
		data := writeTest(t, ParquetSinkOptions{Compression: tc.name}, 50)
		for _, col := range openPQ(t, data).Metadata().RowGroups[0].Columns {
			if col.MetaData.Codec != tc.want {
				t.Errorf("compression %q: column %v has codec %v", tc.name, col.MetaData.PathInSchema, col.MetaData.Codec)
			}
		}
	}
	if _, err := NewParquetWriter(io.Discard, sinkSchema, ParquetSinkOptions{Compression: "lzma"}); err == nil {
		t.Error("unknown compression accepted")
	}
}

func TestParquetSinkDictionaryChoice(t *testing.T) {
	dictCols := func(data []byte) (n int) {
		for _, col := range openPQ(t, data).Metadata().RowGroups[0].Columns {
			if col.MetaData.DictionaryPageOffset > 0 {
				n++
			}
		}
		return n
	}
	if n := dictCols(writeTest(t, ParquetSinkOptions{}, 100)); n != 3 {
		t.Errorf("default: %d dictionary columns, want the 2 string ones and k, which repeats", n)
	}
	if n := dictCols(writeTest(t, ParquetSinkOptions{Dictionary: "strings"}, 100)); n != 2 {
		t.Errorf("strings: %d dictionary columns, want 2", n)
	}
	if n := dictCols(writeTest(t, ParquetSinkOptions{Dictionary: "none"}, 100)); n != 0 {
		t.Errorf("none: %d dictionary columns", n)
	}
	// Parquet has no dictionary encoding for booleans.
	if n := dictCols(writeTest(t, ParquetSinkOptions{Dictionary: "all"}, 100)); n != 5 {
		t.Errorf("all: %d dictionary columns", n)
	}
}

func TestParquetSinkFile(t *testing.T) {
	dir := t.TempDir()
	target := filepath.Join(dir, "scored.parquet")
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	s, err := NewParquetSink(target, sinkSchema, ParquetSinkOptions{Alloc: mem})
	if err != nil {
		t.Fatal(err)
	}
	rec := testBatch(mem, 0, 100)
	defer rec.Release()
	if err := s.Write(context.Background(), rec); err != nil {
		t.Fatal(err)
	}
	if _, err := os.Stat(target); !errors.Is(err, os.ErrNotExist) {
		t.Error("target exists before Close")
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	if err := s.Abort(); err != nil {
		t.Errorf("abort after close: %v", err)
	}
	data, err := os.ReadFile(target)
	if err != nil {
		t.Fatal(err)
	}
	if openPQ(t, data).NumRows() != 100 {
		t.Error("row count")
	}

	// An aborted second run leaves the first output alone.
	s, err = NewParquetSink(target, sinkSchema, ParquetSinkOptions{Alloc: mem})
	if err != nil {
		t.Fatal(err)
	}
	s.Write(context.Background(), rec)
	if err := s.Abort(); err != nil {
		t.Fatal(err)
	}
	if got := listDir(t, dir); len(got) != 1 {
		t.Errorf("directory holds %v", got)
	}
	if again, _ := os.ReadFile(target); !bytes.Equal(again, data) {
		t.Error("abort changed the target")
	}
	rec.Release()
	rec = nil
	mem.AssertSize(t, 0)
}

func TestParquetSinkSchemaMismatch(t *testing.T) {
	dir := t.TempDir()
	target := filepath.Join(dir, "out.parquet")
	s, err := NewParquetSink(target, sinkSchema, ParquetSinkOptions{})
	if err != nil {
		t.Fatal(err)
	}
	other := newSliceSource(memory.DefaultAllocator, 3)
	other.Next(context.Background())
	err = s.Write(context.Background(), other.RecordBatch())
	other.Close()
	var pe *Error
	if !errors.As(err, &pe) || pe.File != target {
		t.Fatalf("error %v, want a *Error naming the output", err)
	}
	if err := s.Close(); err == nil {
		t.Error("Close committed after a failed write")
	}
	if got := listDir(t, dir); len(got) != 0 {
		t.Errorf("directory holds %v", got)
	}
}

func TestParquetSinkRejectsNested(t *testing.T) {
	sc := arrow.NewSchema([]arrow.Field{{Name: "tags", Type: arrow.ListOf(arrow.BinaryTypes.String)}}, nil)
	if _, err := NewParquetWriter(io.Discard, sc, ParquetSinkOptions{}); err == nil {
		t.Error("nested column accepted")
	}
}

func TestParquetSinkEmpty(t *testing.T) {
	data := writeTest(t, ParquetSinkOptions{})
	f := openPQ(t, data)
	if f.NumRows() != 0 || len(f.Schema().Fields()) != len(sinkSchema.Fields()) {
		t.Errorf("empty output: %d rows, schema %v", f.NumRows(), f.Schema())
	}
}

func TestParquetSinkNullInRequired(t *testing.T) {
	sc := arrow.NewSchema([]arrow.Field{{Name: "id", Type: arrow.PrimitiveTypes.Int64}}, nil)
	b := array.NewInt64Builder(memory.DefaultAllocator)
	b.AppendValues([]int64{1, 2}, nil)
	b.AppendNull()
	col := b.NewArray()
	rec := array.NewRecordBatch(sc, []arrow.Array{col}, 3)
	s, err := NewParquetWriter(io.Discard, sc, ParquetSinkOptions{})
	if err != nil {
		t.Fatal(err)
	}
	err = s.Write(context.Background(), rec)
	var pe *Error
	if !errors.As(err, &pe) || pe.Column != "id" {
		t.Errorf("error %v, want one naming column id", err)
	}
	s.Abort()
}

func TestRepeats(t *testing.T) {
	mem := memory.DefaultAllocator
	ints := func(f func(i int) int64, n int) arrow.Array {
		b := array.NewInt64Builder(mem)
		defer b.Release()
		for i := range n {
			b.Append(f(i))
		}
		return b.NewArray()
	}
	for _, tc := range []struct {
		name string
		arr  arrow.Array
		want bool
	}{
		{"codes", ints(func(i int) int64 { return int64(i % 50) }, 20000), true},
		{"ids", ints(func(i int) int64 { return int64(i) }, 20000), false},
		{"half", ints(func(i int) int64 { return int64(i / 2) }, 1000), true},
		{"int8 flags", int8s(mem, 0, 1, 1, 0, 1, 0), true},
		{"strings are not numeric", array.MakeArrayOfNull(mem, arrow.BinaryTypes.String, 10), false},
		{"all null", array.MakeArrayOfNull(mem, arrow.PrimitiveTypes.Int64, 10), false},
	} {
		if got := repeats(tc.arr); got != tc.want {
			t.Errorf("%s: repeats = %v, want %v", tc.name, got, tc.want)
		}
		tc.arr.Release()
	}
}

// TestParquetSinkPageEndsWithRowGroup covers a dictionary column whose last
// page fills up exactly at the end of a row group, so nothing is left for
// the tail flush.
func TestParquetSinkPageEndsWithRowGroup(t *testing.T) {
	sc := arrow.NewSchema([]arrow.Field{{Name: "code", Type: arrow.PrimitiveTypes.Int64, Nullable: true}}, nil)
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	var buf bytes.Buffer
	// Dictionary pages are cut by raw input size: 1024 int64 values = 8 KiB.
	s, err := NewParquetWriter(&buf, sc, ParquetSinkOptions{Alloc: mem, RowGroupRows: 1024, DataPageSize: 8192})
	if err != nil {
		t.Fatal(err)
	}
	for k := range 3 {
		b := array.NewInt64Builder(mem)
		for i := range 1024 {
			b.Append(int64((k*1024 + i) % 7))
		}
		col := b.NewArray()
		rec := array.NewRecordBatch(sc, []arrow.Array{col}, 1024)
		if err := s.Write(context.Background(), rec); err != nil {
			t.Fatal(err)
		}
		rec.Release()
		col.Release()
		b.Release()
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	mem.AssertSize(t, 0)
	f := openPQ(t, buf.Bytes())
	if f.NumRows() != 3072 || len(f.RowGroups()) != 3 {
		t.Fatalf("%d rows in %d row groups", f.NumRows(), len(f.RowGroups()))
	}
	if f.Metadata().RowGroups[0].Columns[0].MetaData.DictionaryPageOffset == 0 {
		t.Error("column not dictionary encoded; the test misses its case")
	}
	r := pq.NewReader(bytes.NewReader(buf.Bytes()))
	defer r.Close()
	rows := make([]pq.Row, 3072)
	n, _ := r.ReadRows(rows)
	for i, row := range rows[:n] {
		if row[0].Int64() != int64(i%7) {
			t.Fatalf("row %d: %v", i, row[0])
		}
	}
	if n != 3072 {
		t.Errorf("read %d rows", n)
	}
}

func int8s(mem memory.Allocator, v ...int8) arrow.Array {
	b := array.NewInt8Builder(mem)
	defer b.Release()
	b.AppendValues(v, nil)
	return b.NewArray()
}

func TestStrDict(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	strs := func(v ...string) *array.String {
		b := array.NewStringBuilder(mem)
		defer b.Release()
		for _, s := range v {
			if s == "" {
				b.AppendNull()
			} else {
				b.Append(s)
			}
		}
		return b.NewStringArray()
	}
	var d strDict
	a := strs("b", "", "a", "b")
	first := d.encode(mem, a).(*array.Int32)
	if got := d.dict.(*array.String); got.Len() != 2 || got.Value(0) != "b" || got.Value(1) != "a" {
		t.Errorf("dictionary %v, want [b a] in first-seen order", got)
	}
	if first.Value(0) != 0 || first.IsValid(1) || first.Value(2) != 1 || first.Value(3) != 0 {
		t.Errorf("indices %v", first)
	}
	dict := d.dict
	b := strs("a", "a")
	again := d.encode(mem, b).(*array.Int32)
	if d.dict != dict || again.Value(0) != 1 || again.Value(1) != 1 {
		t.Errorf("later batch: indices %v, dictionary replaced %v", again, d.dict != dict)
	}
	c := strs("a", "c")
	if got := d.encode(mem, c); got != nil {
		t.Error("a new level was not left to the library")
	}
	for _, x := range []arrow.Array{a, b, c, first, again} {
		x.Release()
	}
	d.reset()

	// A column of names rather than levels is left to pqarrow for the row group.
	names := make([]string, strDictLimit+1)
	for i := range names {
		names[i] = fmt.Sprintf("n%d", i)
	}
	many := strs(names...)
	if got := d.encode(mem, many); got != nil || !d.off {
		t.Error("more than strDictLimit levels were kept")
	}
	few := strs("a")
	if got := d.encode(mem, few); got != nil {
		t.Error("a column given up on came back within the row group")
	}
	few.Release()
	many.Release()
	d.reset()
	mem.AssertSize(t, 0)
}

// TestParquetSinkDiskFull runs the engine into a Parquet file whose disk
// fills up: the error names the output, and neither the target nor a
// temporary file is left.
func TestParquetSinkDiskFull(t *testing.T) {
	dir := t.TempDir()
	target := filepath.Join(dir, "scored.parquet")
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	sc := newSliceSource(mem).schema
	c, err := NewParquetSink(target, sc, ParquetSinkOptions{Alloc: mem, RowGroupRows: 1000})
	if err != nil {
		t.Fatal(err)
	}
	c.(*parquetSink).atomic.out = failWriter{}
	sizes := make([]int, 300)
	for i := range sizes {
		sizes[i] = 997
	}
	src := newSliceSource(mem, sizes...)
	_, err = Run(context.Background(), src, c, func() (Transform, error) { return nilCopy{}, nil }, nil, EngineOptions{Workers: 2})
	src.Close()
	if err == nil {
		err = c.Close()
	}
	c.Abort()
	var pe *Error
	if !errors.Is(err, errDiskFull) || !errors.As(err, &pe) || pe.File != target {
		t.Fatalf("error %v, want a *Error naming %s that wraps the disk error", err, target)
	}
	if got := listDir(t, dir); len(got) != 0 {
		t.Errorf("directory holds %v", got)
	}
	mem.AssertSize(t, 0)
}

// nilCopy passes each batch through.
type nilCopy struct{}

func (nilCopy) Apply(_ context.Context, rec arrow.RecordBatch, _ Location) (arrow.RecordBatch, any, error) {
	rec.Retain()
	return rec, nil, nil
}

// TestParquetSinkFloatLevels writes a repeating float column with -0, +0
// and NaN through the dictionary path and reads the bits back.
func TestParquetSinkFloatLevels(t *testing.T) {
	sc := arrow.NewSchema([]arrow.Field{{Name: "f", Type: arrow.PrimitiveTypes.Float64, Nullable: true}}, nil)
	cycle := []float64{0, math.Copysign(0, -1), math.NaN(), 1.5, 2.5}
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	var buf bytes.Buffer
	s, err := NewParquetWriter(&buf, sc, ParquetSinkOptions{Alloc: mem, RowGroupRows: 2000})
	if err != nil {
		t.Fatal(err)
	}
	want := func(i int) (float64, bool) { return cycle[i%len(cycle)], i%7 == 6 }
	for k := range 3 {
		b := array.NewFloat64Builder(mem)
		for i := k * 1000; i < (k+1)*1000; i++ {
			if v, null := want(i); null {
				b.AppendNull()
			} else {
				b.Append(v)
			}
		}
		col := b.NewArray()
		rec := array.NewRecordBatch(sc, []arrow.Array{col}, 1000)
		if err := s.Write(context.Background(), rec); err != nil {
			t.Fatal(err)
		}
		rec.Release()
		col.Release()
		b.Release()
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	mem.AssertSize(t, 0)
	r := pq.NewReader(bytes.NewReader(buf.Bytes()))
	defer r.Close()
	rows := make([]pq.Row, 3000)
	n, _ := r.ReadRows(rows)
	if n != 3000 {
		t.Fatalf("read %d rows", n)
	}
	for i, row := range rows {
		v, null := want(i)
		if row[0].IsNull() != null || (!null && math.Float64bits(row[0].Double()) != math.Float64bits(v)) {
			t.Fatalf("row %d: got %v, want %v (null %v)", i, row[0], v, null)
		}
	}
}

// A dictionary column that falls back to plain pages gets two data page
// encodings, which arrow-go lists in Go map order; the sink sorts them, so
// the file's bytes are the same on every run.
func TestParquetSinkFallbackDeterministic(t *testing.T) {
	sc := arrow.NewSchema([]arrow.Field{{Name: "ref", Type: arrow.BinaryTypes.String}}, nil)
	b := array.NewStringBuilder(memory.DefaultAllocator)
	for i := range 30000 {
		b.Append(fmt.Sprintf("%064d", i*7919)) // 1.9 MB of distinct values: past the 1 MiB dictionary limit
	}
	arr := b.NewArray()
	b.Release()
	rec := array.NewRecordBatch(sc, []arrow.Array{arr}, int64(arr.Len()))
	arr.Release()
	defer rec.Release()
	var first []byte
	for run := range 8 {
		var buf bytes.Buffer
		s, err := NewParquetWriter(&buf, sc, ParquetSinkOptions{Dictionary: "all", RowGroupRows: 1 << 20})
		if err != nil {
			t.Fatal(err)
		}
		if err := s.Write(context.Background(), rec); err != nil {
			t.Fatal(err)
		}
		if err := s.Close(); err != nil {
			t.Fatal(err)
		}
		if run == 0 {
			first = buf.Bytes()
			m, err := parseFooter(first)
			if err != nil {
				t.Fatal(err)
			}
			if st := m.RowGroups[0].Columns[0].MetaData.EncodingStats; len(st) < 3 {
				t.Fatalf("encoding stats %v: the column did not fall back, the test tests nothing", st)
			}
			pf, err := pq.OpenFile(bytes.NewReader(first), int64(len(first)))
			if err != nil || pf.NumRows() != 30000 {
				t.Fatalf("parquet-go reads the re-encoded footer: %v", err)
			}
			continue
		}
		if !bytes.Equal(buf.Bytes(), first) {
			t.Fatalf("run %d wrote different bytes", run)
		}
	}
}
