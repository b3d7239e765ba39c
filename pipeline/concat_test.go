package pipeline

import (
	"bytes"
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

func TestConcat(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	gen := memory.NewGoAllocator()
	dir := t.TempDir()
	full := sampleRecord(gen, 0, 30)
	defer full.Release()
	a, b, c := full.NewSlice(0, 10), full.NewSlice(10, 25), full.NewSlice(25, 30)
	defer a.Release()
	defer b.Release()
	defer c.Release()
	pa, pb, pc := filepath.Join(dir, "a.parquet"), filepath.Join(dir, "b.arrow"), filepath.Join(dir, "c.parquet")
	writeParquet(t, pa, sampleSchema, 4, a)
	writeIPC(t, pb, sampleSchema, false, b)
	writeParquet(t, pc, sampleSchema, 100, c)
	ins := []Input{{Path: pa, Format: FormatParquet}, {Path: pb, Format: FormatArrowFile}, {Path: pc, Format: FormatParquet}}

	src, err := Concat(context.Background(), ins, SourceOptions{Alloc: mem, BatchRows: 3})
	if err != nil {
		t.Fatal(err)
	}
	defer src.Close()
	var files []string
	row := int64(0)
	for src.Next(context.Background()) {
		rec := src.RecordBatch()
		loc := src.Location()
		if len(files) == 0 || files[len(files)-1] != filepath.Base(loc.File) {
			files = append(files, filepath.Base(loc.File))
		}
		if !rec.Schema().Equal(src.Schema()) {
			t.Fatalf("batch schema differs from the source's")
		}
		want := full.NewSlice(row, row+rec.NumRows())
		if !array.RecordEqual(want, rec) {
			t.Errorf("rows %d..: got %v, want %v", row, rec, want)
		}
		want.Release()
		row += rec.NumRows()
	}
	if err := src.Err(); err != nil {
		t.Fatal(err)
	}
	if row != 30 {
		t.Errorf("read %d rows, want 30", row)
	}
	if got := strings.Join(files, ","); got != "a.parquet,b.arrow,c.parquet" {
		t.Errorf("locations went through %s", got)
	}
}

func TestConcatSchemaMismatch(t *testing.T) {
	gen := memory.NewGoAllocator()
	rec := sampleRecord(gen, 0, 5)
	defer rec.Release()
	renamed := arrow.NewSchema(append(append([]arrow.Field(nil), sampleSchema.Fields()[:2]...),
		append([]arrow.Field{{Name: "F32", Type: arrow.PrimitiveTypes.Float32, Nullable: true}}, sampleSchema.Fields()[3:]...)...), nil)
	retyped := arrow.NewSchema([]arrow.Field{{Name: "i32", Type: arrow.PrimitiveTypes.Int64}}, nil)
	shorter := arrow.NewSchema(sampleSchema.Fields()[:4], nil)
	i64 := array.NewInt64Builder(gen)
	defer i64.Release()
	i64.AppendValues([]int64{1, 2, 3, 4, 5}, nil)
	i64col := i64.NewArray()
	defer i64col.Release()

	dir := t.TempDir()
	first := filepath.Join(dir, "first.parquet")
	writeParquet(t, first, sampleSchema, 10, rec)
	write := func(name string, sc *arrow.Schema, cols []arrow.Array) string {
		p := filepath.Join(dir, name)
		r := array.NewRecordBatch(sc, cols, 5)
		defer r.Release()
		writeParquet(t, p, sc, 10, r)
		return p
	}
	tests := []struct {
		name   string
		path   string
		column string
		msg    string
	}{
		{"renamed column", write("renamed.parquet", renamed, rec.Columns()), "F32", `column 3 is "F32" here but "f32" there`},
		{"other type", write("retyped.parquet", retyped, []arrow.Array{i64col}), "i32", "type int64 here but int32 there"},
		{"fewer columns", write("shorter.parquet", shorter, rec.Columns()[:4]), "b", "column missing here"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
			defer mem.AssertSize(t, 0)
			ins := []Input{{Path: first, Format: FormatParquet}, {Path: tt.path, Format: FormatParquet}}
			src, err := Concat(context.Background(), ins, SourceOptions{Alloc: mem})
			if err == nil {
				src.Close()
				t.Fatal("no error")
			}
			var e *Error
			if !errors.As(err, &e) || e.File != tt.path || e.Column != tt.column {
				t.Fatalf("got %v, want an *Error naming %s and column %q", err, tt.path, tt.column)
			}
			if !strings.Contains(err.Error(), first) || !strings.Contains(err.Error(), tt.msg) {
				t.Errorf("%q does not name the first file or say %q", err, tt.msg)
			}
		})
	}
}

// Standard input cannot be opened twice, so it is checked when reached.
func TestConcatStdinCheckedLate(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	gen := memory.NewGoAllocator()
	rec := sampleRecord(gen, 0, 5)
	defer rec.Release()
	dir := t.TempDir()
	first := filepath.Join(dir, "first.parquet")
	writeParquet(t, first, sampleSchema, 10, rec)
	other := arrow.NewSchema(sampleSchema.Fields()[:1], nil)
	short := array.NewRecordBatch(other, rec.Columns()[:1], 5)
	defer short.Release()
	stream := writeIPC(t, "", other, true, short)

	ins := []Input{{Path: first, Format: FormatParquet}, {Path: Stdin, Format: FormatArrowStream}}
	src, err := Concat(context.Background(), ins, SourceOptions{Alloc: mem, Stdin: bytes.NewReader(stream)})
	if err != nil {
		t.Fatal(err)
	}
	defer src.Close()
	err = drain(src)
	var e *Error
	if !errors.As(err, &e) || e.File != Stdin || e.Column != "i64" {
		t.Fatalf("got %v, want an *Error for stdin naming column i64", err)
	}
}

// Nullability may differ between files; the concatenation is nullable.
func TestConcatNullability(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	dir := t.TempDir()
	req := arrow.NewSchema([]arrow.Field{{Name: "x", Type: arrow.PrimitiveTypes.Float64}}, nil)
	opt := arrow.NewSchema([]arrow.Field{{Name: "x", Type: arrow.PrimitiveTypes.Float64, Nullable: true}}, nil)
	gen := memory.NewGoAllocator()
	bld := array.NewFloat64Builder(gen)
	defer bld.Release()
	bld.AppendValues([]float64{1, 2}, nil)
	col := bld.NewArray()
	defer col.Release()
	for name, sc := range map[string]*arrow.Schema{"req.parquet": req, "opt.parquet": opt} {
		r := array.NewRecordBatch(sc, []arrow.Array{col}, 2)
		writeParquet(t, filepath.Join(dir, name), sc, 10, r)
		r.Release()
	}
	ins := []Input{{Path: filepath.Join(dir, "req.parquet"), Format: FormatParquet}, {Path: filepath.Join(dir, "opt.parquet"), Format: FormatParquet}}
	src, err := Concat(context.Background(), ins, SourceOptions{Alloc: mem})
	if err != nil {
		t.Fatal(err)
	}
	defer src.Close()
	if !src.Schema().Field(0).Nullable {
		t.Error("concatenated column is not nullable")
	}
	n := 0
	for src.Next(context.Background()) {
		if !src.RecordBatch().Schema().Equal(src.Schema()) {
			t.Error("batch schema differs from the source's")
		}
		n++
	}
	if err := src.Err(); err != nil || n != 2 {
		t.Fatalf("%d batches, %v", n, err)
	}
}

func TestConcatOpenError(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	dir := t.TempDir()
	good := filepath.Join(dir, "good.parquet")
	rec := sampleRecord(memory.NewGoAllocator(), 0, 5)
	defer rec.Release()
	writeParquet(t, good, sampleSchema, 10, rec)
	bad := filepath.Join(dir, "bad.parquet")
	if err := os.WriteFile(bad, []byte("PAR1 junk"), 0o644); err != nil {
		t.Fatal(err)
	}
	_, err := Concat(context.Background(), []Input{{Path: good, Format: FormatParquet}, {Path: bad, Format: FormatParquet}}, SourceOptions{Alloc: mem})
	var e *Error
	if !errors.As(err, &e) || e.File != bad {
		t.Fatalf("got %v, want an *Error naming %s", err, bad)
	}
	if _, err := Concat(context.Background(), nil, SourceOptions{}); err == nil {
		t.Error("Concat of nothing gave no error")
	}
}
