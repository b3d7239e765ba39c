package pipeline

import (
	"context"
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"
)

func names(sc *arrow.Schema) string {
	var out []string
	for _, f := range sc.Fields() {
		out = append(out, f.Name)
	}
	return strings.Join(out, ",")
}

func TestOpenProjection(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "p.parquet")
	rec := sampleRecord(memory.NewGoAllocator(), 0, 50)
	defer rec.Release()
	writeParquet(t, path, sampleSchema, 20, rec)
	// A partitioned copy, to project partition columns too.
	pdir := filepath.Join(dir, "arm=treated", "day=2024-05-01")
	if err := os.MkdirAll(pdir, 0o755); err != nil {
		t.Fatal(err)
	}
	ppath := filepath.Join(pdir, "p.parquet")
	writeParquet(t, ppath, sampleSchema, 20, rec)
	part := Input{Path: ppath, Format: FormatParquet, Partitions: []Partition{{"arm", "treated"}, {"day", "2024-05-01"}}}
	plain := Input{Path: path, Format: FormatParquet}

	tests := []struct {
		name       string
		in         Input
		columns    []string
		partitions bool
		want       string // column names, or the column a wanted *Error names
		wantErr    bool
	}{
		{"all", plain, nil, false, "i32,i64,f32,f64,b,s,d", false},
		{"file order, not request order", plain, []string{"s", "i32", "d"}, false, "i32,s,d", false},
		{"missing column", plain, []string{"i32", "propensity"}, false, "propensity", true},
		{"partition columns appended", part, nil, true, "i32,i64,f32,f64,b,s,d,arm,day", false},
		{"partition columns off", part, nil, false, "i32,i64,f32,f64,b,s,d", false},
		{"projected partition column", part, []string{"day", "f64"}, true, "f64,day", false},
		{"only a partition column", part, []string{"arm"}, true, "arm", false},
		{"partition key without the option is missing", part, []string{"arm"}, false, "arm", true},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
			defer mem.AssertSize(t, 0)
			src, err := Open(context.Background(), tt.in, SourceOptions{Alloc: mem, Columns: tt.columns, PartitionColumns: tt.partitions, BatchRows: 16})
			if tt.wantErr {
				var e *Error
				if !errors.As(err, &e) || e.Column != tt.want || e.File != tt.in.Path {
					t.Fatalf("got %v, want an *Error for %s naming column %q", err, tt.in.Path, tt.want)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			defer src.Close()
			if got := names(src.Schema()); got != tt.want {
				t.Fatalf("columns %s, want %s", got, tt.want)
			}
			rows := int64(0)
			for src.Next(context.Background()) {
				b := src.RecordBatch()
				rows += b.NumRows()
				if b.NumCols() != int64(len(src.Schema().Fields())) {
					t.Fatalf("batch has %d columns", b.NumCols())
				}
				for i, f := range b.Schema().Fields() {
					if p := partValue(tt.in, f.Name); p != "" && tt.partitions {
						col := b.Column(i).(*array.String)
						for r := range col.Len() {
							if col.Value(r) != p {
								t.Fatalf("%s[%d] = %q, want %q", f.Name, r, col.Value(r), p)
							}
						}
					}
				}
			}
			if err := src.Err(); err != nil {
				t.Fatal(err)
			}
			if rows != 50 {
				t.Errorf("read %d rows, want 50", rows)
			}
		})
	}
}

func partValue(in Input, key string) string {
	for _, p := range in.Partitions {
		if p.Key == key {
			return p.Value
		}
	}
	return ""
}

func TestPartitionColumnsKeepFileColumn(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	path := filepath.Join(t.TempDir(), "p.parquet")
	rec := sampleRecord(memory.NewGoAllocator(), 0, 5)
	defer rec.Release()
	writeParquet(t, path, sampleSchema, 20, rec)
	in := Input{Path: path, Format: FormatParquet, Partitions: []Partition{{"s", "from-folder"}, {"region", hiveNull}}}
	src, err := Open(context.Background(), in, SourceOptions{Alloc: mem, PartitionColumns: true})
	if err != nil {
		t.Fatal(err)
	}
	defer src.Close()
	if got, want := names(src.Schema()), "i32,i64,f32,f64,b,s,d,region"; got != want {
		t.Fatalf("columns %s, want %s", got, want)
	}
	if ps, ok := src.(PartitionedSource); !ok || strings.Join(ps.PartitionColumns(), ",") != "region" {
		t.Errorf("PartitionColumns reports %v", src)
	}
	if !src.Next(context.Background()) {
		t.Fatal(src.Err())
	}
	b := src.RecordBatch()
	if got := b.Column(5).(*array.String).Value(1); got != "row-1" {
		t.Errorf("file column s replaced by the partition: %q", got)
	}
	if n := b.Column(7).NullN(); n != 5 {
		t.Errorf("%s partition gave %d nulls, want 5", hiveNull, n)
	}
}

func TestParquetZeroRows(t *testing.T) {
	for _, tt := range []struct {
		name  string
		write func(t *testing.T, path string)
	}{
		{"no row groups", func(t *testing.T, path string) { writeParquet(t, path, sampleSchema, 10) }},
		{"an empty row group", func(t *testing.T, path string) {
			rec := sampleRecord(memory.NewGoAllocator(), 0, 0)
			defer rec.Release()
			writeParquet(t, path, sampleSchema, 10, rec)
		}},
	} {
		t.Run(tt.name, func(t *testing.T) {
			mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
			defer mem.AssertSize(t, 0)
			path := filepath.Join(t.TempDir(), "empty.parquet")
			tt.write(t, path)
			src, err := Open(context.Background(), Input{Path: path, Format: FormatParquet}, SourceOptions{Alloc: mem})
			if err != nil {
				t.Fatal(err)
			}
			defer src.Close()
			if !src.Schema().Equal(sampleSchema) {
				t.Errorf("schema %v", src.Schema())
			}
			if src.Next(context.Background()) {
				t.Errorf("Next gave a batch of %d rows", src.RecordBatch().NumRows())
			}
			if err := src.Err(); err != nil {
				t.Errorf("Err() = %v", err)
			}
		})
	}
}

func TestParquetMetadata(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	path := filepath.Join(t.TempDir(), "m.parquet")
	md := arrow.NewMetadata([]string{"owner", "snapshot"}, []string{"growth", "2024-05-01"})
	sc := arrow.NewSchema(sampleSchema.Fields(), &md)
	rec := sampleRecord(memory.NewGoAllocator(), 0, 3)
	defer rec.Release()
	writeParquet(t, path, sc, 10, rec)
	src, err := Open(context.Background(), Input{Path: path, Format: FormatParquet}, SourceOptions{Alloc: mem})
	if err != nil {
		t.Fatal(err)
	}
	defer src.Close()
	m, ok := src.(MetadataSource)
	if !ok {
		t.Fatal("Parquet source is no MetadataSource")
	}
	got := m.Metadata()
	if got.FindKey(arrowSchemaKey) >= 0 {
		t.Errorf("metadata keeps %s", arrowSchemaKey)
	}
	for _, k := range md.Keys() {
		want, _ := md.GetValue(k)
		if v, ok := got.GetValue(k); !ok || v != want {
			t.Errorf("metadata %s = %q, want %q", k, v, want)
		}
	}
}

func TestCancelledContext(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	path := filepath.Join(t.TempDir(), "c.parquet")
	rec := sampleRecord(memory.NewGoAllocator(), 0, 40)
	defer rec.Release()
	writeParquet(t, path, sampleSchema, 10, rec)
	ctx, cancel := context.WithCancel(context.Background())
	src, err := Open(ctx, Input{Path: path, Format: FormatParquet}, SourceOptions{Alloc: mem})
	if err != nil {
		t.Fatal(err)
	}
	defer src.Close()
	if !src.Next(ctx) {
		t.Fatal(src.Err())
	}
	cancel()
	if src.Next(ctx) {
		t.Fatal("Next after cancel gave a batch")
	}
	if err := src.Err(); !errors.Is(err, context.Canceled) {
		t.Fatalf("Err() = %v, want context.Canceled", err)
	}
}

func TestParquetDuplicateColumns(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	sc := arrow.NewSchema([]arrow.Field{
		{Name: "x", Type: arrow.PrimitiveTypes.Int64},
		{Name: "y", Type: arrow.PrimitiveTypes.Int64},
		{Name: "x", Type: arrow.PrimitiveTypes.Int64},
	}, nil)
	gen := memory.NewGoAllocator()
	bld := array.NewInt64Builder(gen)
	defer bld.Release()
	bld.AppendValues([]int64{1, 2}, nil)
	col := bld.NewArray()
	defer col.Release()
	rec := array.NewRecordBatch(sc, []arrow.Array{col, col, col}, 2)
	defer rec.Release()
	path := filepath.Join(t.TempDir(), "dup.parquet")
	writeParquet(t, path, sc, 10, rec)
	_, err := Open(context.Background(), Input{Path: path, Format: FormatParquet}, SourceOptions{Alloc: mem})
	var e *Error
	if !errors.As(err, &e) || e.File != path || e.Column != "x" || !strings.Contains(err.Error(), `duplicate column name "x"`) {
		t.Fatalf("got %v, want an *Error naming %s and the duplicate x", err, path)
	}
}

func TestOpenMissingFile(t *testing.T) {
	for _, f := range []Format{FormatParquet, FormatArrowFile, FormatArrowStream, FormatCSV} {
		path := filepath.Join(t.TempDir(), "gone")
		_, err := Open(context.Background(), Input{Path: path, Format: f}, SourceOptions{})
		var e *Error
		if !errors.As(err, &e) || e.File != path || !errors.Is(err, os.ErrNotExist) || strings.Count(err.Error(), path) != 1 {
			t.Errorf("%v: got %v, want an *Error naming %s once, wrapping ErrNotExist", f, err, path)
		}
	}
}

func TestOpenWithoutFormat(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	dir := t.TempDir()
	rec := sampleRecord(memory.NewGoAllocator(), 0, 5)
	defer rec.Release()
	pq := filepath.Join(dir, "a.parquet")
	writeParquet(t, pq, sampleSchema, 10, rec)
	noext := filepath.Join(dir, "blob")
	writeIPC(t, noext, sampleSchema, false, rec)
	for _, path := range []string{pq, noext} {
		src, err := Open(context.Background(), Input{Path: path}, SourceOptions{Alloc: mem})
		if err != nil {
			t.Fatal(err)
		}
		readAll(t, src, rec)
		src.Close()
	}
}

// DictionaryColumns reads the named Parquet string columns as dictionary
// arrays holding the same values; other columns keep their types.
func TestOpenDictionaryColumns(t *testing.T) {
	path := filepath.Join(t.TempDir(), "p.parquet")
	rec := sampleRecord(memory.NewGoAllocator(), 0, 50)
	defer rec.Release()
	writeParquet(t, path, sampleSchema, 20, rec)
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	src, err := Open(context.Background(), Input{Path: path, Format: FormatParquet}, SourceOptions{Alloc: mem, DictionaryColumns: []string{"s"}, Columns: []string{"s", "i32"}})
	if err != nil {
		t.Fatal(err)
	}
	defer src.Close()
	si := src.Schema().FieldIndices("s")[0]
	if id := src.Schema().Field(si).Type.ID(); id != arrow.DICTIONARY {
		t.Fatalf("s is %v, want a dictionary", src.Schema().Field(si).Type)
	}
	var row int64
	for src.Next(context.Background()) {
		b := src.RecordBatch()
		d := b.Column(si).(*array.Dictionary)
		want := rec.Column(rec.Schema().FieldIndices("s")[0]).(*array.String)
		for i := 0; i < d.Len(); i++ {
			r := int(row) + i
			if d.IsNull(i) != want.IsNull(r) || !d.IsNull(i) && d.Dictionary().(*array.String).Value(d.GetValueIndex(i)) != want.Value(r) {
				t.Fatalf("row %d: dictionary value differs from the written string", r)
			}
		}
		row += b.NumRows()
	}
	if err := src.Err(); err != nil || row != 50 {
		t.Fatalf("read %d rows: %v", row, err)
	}
}
