package pipeline

import (
	"context"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"testing"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"
	"github.com/apache/arrow-go/v18/parquet"
	"github.com/apache/arrow-go/v18/parquet/compress"
	"github.com/apache/arrow-go/v18/parquet/pqarrow"
)

// sampleSchema has every column type heft's tests read.
var sampleSchema = arrow.NewSchema([]arrow.Field{
	{Name: "i32", Type: arrow.PrimitiveTypes.Int32},
	{Name: "i64", Type: arrow.PrimitiveTypes.Int64, Nullable: true},
	{Name: "f32", Type: arrow.PrimitiveTypes.Float32, Nullable: true},
	{Name: "f64", Type: arrow.PrimitiveTypes.Float64, Nullable: true},
	{Name: "b", Type: arrow.FixedWidthTypes.Boolean, Nullable: true},
	{Name: "s", Type: arrow.BinaryTypes.String, Nullable: true},
	{Name: "d", Type: &arrow.DictionaryType{IndexType: arrow.PrimitiveTypes.Int32, ValueType: arrow.BinaryTypes.String}, Nullable: true},
}, nil)

// sampleRecord builds n rows of sampleSchema with a null every few rows;
// row r starts from first.
func sampleRecord(mem memory.Allocator, first, n int) arrow.RecordBatch {
	b := array.NewRecordBuilder(mem, sampleSchema)
	defer b.Release()
	arms := []string{"control", "treated", "holdout"}
	for k := range n {
		r := first + k
		b.Field(0).(*array.Int32Builder).Append(int32(r))
		if r%7 == 3 {
			b.Field(1).AppendNull()
		} else {
			b.Field(1).(*array.Int64Builder).Append(int64(r) * 1000003)
		}
		b.Field(2).(*array.Float32Builder).Append(float32(r) / 4)
		if r%5 == 1 {
			b.Field(3).AppendNull()
		} else {
			b.Field(3).(*array.Float64Builder).Append(float64(r) * 0.5)
		}
		b.Field(4).(*array.BooleanBuilder).Append(r%3 == 0)
		if r%11 == 0 {
			b.Field(5).AppendNull()
		} else {
			b.Field(5).(*array.StringBuilder).Append(fmt.Sprintf("row-%d", r))
		}
		if err := b.Field(6).(*array.BinaryDictionaryBuilder).AppendString(arms[r%3]); err != nil {
			panic(err)
		}
	}
	return b.NewRecordBatch()
}

// writeParquet writes recs to path with row groups of at most rgRows rows.
func writeParquet(t testing.TB, path string, sc *arrow.Schema, rgRows int64, recs ...arrow.RecordBatch) {
	t.Helper()
	f, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	props := parquet.NewWriterProperties(
		parquet.WithMaxRowGroupLength(rgRows),
		parquet.WithDictionaryDefault(true),
		parquet.WithCompression(compress.Codecs.Snappy),
	)
	w, err := pqarrow.NewFileWriter(sc, f, props, pqarrow.NewArrowWriterProperties(pqarrow.WithStoreSchema()))
	if err != nil {
		t.Fatal(err)
	}
	for _, rec := range recs {
		if err := w.Write(rec); err != nil {
			t.Fatal(err)
		}
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
}

// readAll drains src, checking that each batch matches want at its
// location, and returns the locations seen.
func readAll(t *testing.T, src Source, want arrow.RecordBatch) []Location {
	t.Helper()
	var locs []Location
	for src.Next(context.Background()) {
		rec := src.RecordBatch()
		loc := src.Location()
		locs = append(locs, loc)
		if want == nil {
			continue
		}
		if !rec.Schema().Equal(src.Schema()) {
			t.Fatalf("batch schema %v, source schema %v", rec.Schema(), src.Schema())
		}
		for i, f := range rec.Schema().Fields() {
			j := want.Schema().FieldIndices(f.Name)
			if len(j) == 0 {
				continue
			}
			exp := array.NewSlice(want.Column(j[0]), loc.Row, loc.Row+rec.NumRows())
			if !array.Equal(exp, rec.Column(i)) {
				t.Errorf("%s at row %d: got %v, want %v", f.Name, loc.Row, rec.Column(i), exp)
			}
			exp.Release()
		}
	}
	if err := src.Err(); err != nil {
		t.Fatal(err)
	}
	return locs
}

func TestParquetSourceBatches(t *testing.T) {
	tests := []struct {
		name       string
		rows       int
		rgRows     int64
		batchRows  int
		wantGroups []int64
		wantLocs   []Location // File filled in by the test
	}{
		{"one group, one batch", 10, 100, 0, []int64{10}, []Location{{RowGroup: 0, Row: 0}}},
		{"batches within a group", 10, 100, 4, []int64{10}, []Location{{RowGroup: 0, Row: 0}, {RowGroup: 0, Row: 4}, {RowGroup: 0, Row: 8}}},
		{"batch never spans groups", 10, 4, 3, []int64{4, 4, 2}, []Location{
			{RowGroup: 0, Row: 0}, {RowGroup: 0, Row: 3}, {RowGroup: 1, Row: 4}, {RowGroup: 1, Row: 7}, {RowGroup: 2, Row: 8}}},
		{"batch equals group", 9, 3, 3, []int64{3, 3, 3}, []Location{{RowGroup: 0, Row: 0}, {RowGroup: 1, Row: 3}, {RowGroup: 2, Row: 6}}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
			defer mem.AssertSize(t, 0)
			path := filepath.Join(t.TempDir(), "x.parquet")
			rec := sampleRecord(mem, 0, tt.rows)
			defer rec.Release()
			writeParquet(t, path, sampleSchema, tt.rgRows, rec)

			groups, err := RowGroups(path)
			if err != nil {
				t.Fatal(err)
			}
			if fmt.Sprint(groups) != fmt.Sprint(tt.wantGroups) {
				t.Fatalf("RowGroups = %v, want %v", groups, tt.wantGroups)
			}
			src, err := Open(context.Background(), Input{Path: path, Format: FormatParquet}, SourceOptions{Alloc: mem, BatchRows: tt.batchRows})
			if err != nil {
				t.Fatal(err)
			}
			defer src.Close()
			if !src.Schema().Equal(sampleSchema) {
				t.Fatalf("schema %v, want %v", src.Schema(), sampleSchema)
			}
			locs := readAll(t, src, rec)
			for i := range tt.wantLocs {
				tt.wantLocs[i].File = path
			}
			if fmt.Sprint(locs) != fmt.Sprint(tt.wantLocs) {
				t.Errorf("locations %v, want %v", locs, tt.wantLocs)
			}
		})
	}
}

// drain reads src to the end and returns Err.
func drain(src Source) error {
	for src.Next(context.Background()) {
	}
	return src.Err()
}

// openAndDrain opens path as Parquet and reads it all, returning the first
// error from Open, reading or Close.
func openAndDrain(path string, mem memory.Allocator) error {
	src, err := Open(context.Background(), Input{Path: path, Format: FormatParquet}, SourceOptions{Alloc: mem, BatchRows: 16})
	if err != nil {
		return err
	}
	err = drain(src)
	if cerr := src.Close(); err == nil {
		err = cerr
	}
	return err
}

// footerStart is the offset of the Thrift footer of a valid Parquet file.
func footerStart(t *testing.T, b []byte) int {
	t.Helper()
	n := len(b)
	if n < 12 || string(b[n-4:]) != "PAR1" {
		t.Fatal("not a Parquet file")
	}
	flen := int(b[n-8]) | int(b[n-7])<<8 | int(b[n-6])<<16 | int(b[n-5])<<24
	return n - 8 - flen
}

func TestParquetBadFiles(t *testing.T) {
	dir := t.TempDir()
	good := filepath.Join(dir, "good.parquet")
	mem0 := memory.NewGoAllocator()
	rec := sampleRecord(mem0, 0, 300)
	defer rec.Release()
	writeParquet(t, good, sampleSchema, 100, rec)
	orig, err := os.ReadFile(good)
	if err != nil {
		t.Fatal(err)
	}
	fs := footerStart(t, orig)
	groups, err := RowGroups(good)
	if err != nil || len(groups) != 3 {
		t.Fatalf("fixture: row groups %v, %v", groups, err)
	}

	tests := []struct {
		name         string
		bytes        []byte
		wantRowGroup bool // the error must name a row group
	}{
		{"zero bytes", nil, false},
		{"wrong magic", append([]byte("NOPE"), orig[4:len(orig)-4]...), false},
		{"not parquet at all", []byte("id,arm\n1,treated\n"), false},
		{"truncated footer", orig[:len(orig)-7], false},
		{"footer only half there", append(append([]byte(nil), orig[:fs+(len(orig)-fs)/2]...), orig[len(orig)-8:]...), false},
		// The data of the second and third row groups is cut out while the
		// footer still points at it.
		{"truncated in a row group", append(append([]byte(nil), orig[:fs/2]...), orig[fs:]...), true},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
			defer mem.AssertSize(t, 0)
			path := filepath.Join(t.TempDir(), "bad.parquet")
			if err := os.WriteFile(path, tt.bytes, 0o644); err != nil {
				t.Fatal(err)
			}
			err := openAndDrain(path, mem)
			var e *Error
			if !errors.As(err, &e) {
				t.Fatalf("got %v (%T), want an *Error", err, err)
			}
			if e.File != path {
				t.Errorf("error names file %q, want %q: %v", e.File, path, err)
			}
			if tt.wantRowGroup && e.RowGroup < 0 {
				t.Errorf("error names no row group: %v", err)
			}
			if _, err := RowGroups(path); err == nil && !tt.wantRowGroup {
				t.Errorf("RowGroups on a bad footer gave no error")
			}
		})
	}

	// A flipped byte anywhere in the column data must give an *Error naming
	// the file or, where the damage is undetectable (Parquet pages carry no
	// checksum here), a clean read; never a panic or a leak.
	t.Run("flipped byte in a page", func(t *testing.T) {
		mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
		defer mem.AssertSize(t, 0)
		path := filepath.Join(t.TempDir(), "flip.parquet")
		errs := 0
		for off := 4; off < fs; off += max(1, fs/150) {
			b := append([]byte(nil), orig...)
			b[off] ^= 0x5a
			if err := os.WriteFile(path, b, 0o644); err != nil {
				t.Fatal(err)
			}
			err := openAndDrain(path, mem)
			if err == nil {
				continue
			}
			errs++
			if testing.Verbose() && errs%10 == 1 {
				t.Logf("offset %d: %v", off, err)
			}
			var e *Error
			if !errors.As(err, &e) || e.File != path {
				t.Fatalf("offset %d: got %v (%T), want an *Error naming the file", off, err, err)
			}
			if e.RowGroup < 0 {
				t.Errorf("offset %d: error names no row group: %v", off, err)
			}
		}
		if errs == 0 {
			t.Error("no flipped byte was detected")
		}
		t.Logf("%d flips detected", errs)
	})
}

// benchSchema is a warehouse-like table: 12 columns of the common types.
var benchSchema = arrow.NewSchema([]arrow.Field{
	{Name: "id", Type: arrow.PrimitiveTypes.Int64},
	{Name: "treated", Type: arrow.FixedWidthTypes.Boolean, Nullable: true},
	{Name: "age", Type: arrow.PrimitiveTypes.Int32, Nullable: true},
	{Name: "visits", Type: arrow.PrimitiveTypes.Int32, Nullable: true},
	{Name: "tenure", Type: arrow.PrimitiveTypes.Int64, Nullable: true},
	{Name: "spend", Type: arrow.PrimitiveTypes.Float64, Nullable: true},
	{Name: "x1", Type: arrow.PrimitiveTypes.Float64, Nullable: true},
	{Name: "x2", Type: arrow.PrimitiveTypes.Float64, Nullable: true},
	{Name: "x3", Type: arrow.PrimitiveTypes.Float64, Nullable: true},
	{Name: "ratio", Type: arrow.PrimitiveTypes.Float32, Nullable: true},
	{Name: "region", Type: arrow.BinaryTypes.String, Nullable: true},
	{Name: "segment", Type: arrow.BinaryTypes.String, Nullable: true},
}, nil)

// writeBenchFile writes rows rows of benchSchema (invented values) in
// row groups of 256Ki rows.
func writeBenchFile(b *testing.B, path string, rows int) {
	mem := memory.NewGoAllocator()
	regions := []string{"north", "south", "east", "west", "central"}
	const chunk = 1 << 16
	var recs []arrow.RecordBatch
	for lo := 0; lo < rows; lo += chunk {
		rb := array.NewRecordBuilder(mem, benchSchema)
		for r := lo; r < min(lo+chunk, rows); r++ {
			rb.Field(0).(*array.Int64Builder).Append(int64(r))
			rb.Field(1).(*array.BooleanBuilder).Append(r%3 == 0)
			rb.Field(2).(*array.Int32Builder).Append(int32(18 + r%60))
			rb.Field(3).(*array.Int32Builder).Append(int32(r % 17))
			rb.Field(4).(*array.Int64Builder).Append(int64(r % 3650))
			if r%50 == 0 {
				rb.Field(5).AppendNull()
			} else {
				rb.Field(5).(*array.Float64Builder).Append(float64(r%1000) * 1.25)
			}
			for j := 6; j <= 8; j++ {
				rb.Field(j).(*array.Float64Builder).Append(float64((r*(j+7))%10007) / 10007)
			}
			rb.Field(9).(*array.Float32Builder).Append(float32(r%101) / 101)
			rb.Field(10).(*array.StringBuilder).Append(regions[r%len(regions)])
			rb.Field(11).(*array.StringBuilder).Append(fmt.Sprintf("seg-%04d", r%2000))
		}
		recs = append(recs, rb.NewRecordBatch())
		rb.Release()
	}
	writeParquet(b, path, benchSchema, 1<<18, recs...)
	for _, r := range recs {
		r.Release()
	}
}

// BenchmarkParquetRead reads a 1M-row, 12-column file, strings as plain
// utf8 (what Open does) and as dictionaries.
func BenchmarkParquetRead(b *testing.B) {
	const rows = 1 << 20
	path := filepath.Join(b.TempDir(), "bench.parquet")
	writeBenchFile(b, path, rows)
	for _, mode := range []struct {
		name string
		dict bool
	}{{"utf8", false}, {"dict", true}} {
		b.Run(mode.name, func(b *testing.B) {
			opt := SourceOptions{readDict: mode.dict}
			for b.Loop() {
				src, err := Open(context.Background(), Input{Path: path, Format: FormatParquet}, opt)
				if err != nil {
					b.Fatal(err)
				}
				n := int64(0)
				for src.Next(context.Background()) {
					n += src.RecordBatch().NumRows()
				}
				if err := src.Err(); err != nil || n != rows {
					b.Fatalf("%d rows, %v", n, err)
				}
				src.Close()
			}
			b.ReportMetric(float64(rows)*float64(b.N)/b.Elapsed().Seconds(), "rows/s")
		})
	}
}
