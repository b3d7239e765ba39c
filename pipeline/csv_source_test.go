package pipeline

import (
	"context"
	"errors"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"
)

func writeFile(t *testing.T, name, body string) string {
	t.Helper()
	path := filepath.Join(t.TempDir(), name)
	if err := os.WriteFile(path, []byte(body), 0o644); err != nil {
		t.Fatal(err)
	}
	return path
}

func TestCSVInference(t *testing.T) {
	const body = "\ufeffid,x,flag,arm,score,blank,big,spaced\n" +
		"1,0.5,true,treated,NaN,,9223372036854775807, 3\n" +
		"2,,FALSE,control,inf,,1,4 \n" +
		"3,-2,True,,-Infinity,,2,\n" +
		"-4,1e3,false,\"quoted, with comma\",+Inf,,3,5\n"
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	path := writeFile(t, "s.csv", body)
	src, err := Open(context.Background(), Input{Path: path, Format: FormatCSV}, SourceOptions{Alloc: mem, BatchRows: 3})
	if err != nil {
		t.Fatal(err)
	}
	defer src.Close()
	wantTypes := []arrow.DataType{
		arrow.PrimitiveTypes.Int64, arrow.PrimitiveTypes.Float64, arrow.FixedWidthTypes.Boolean,
		arrow.BinaryTypes.String, arrow.PrimitiveTypes.Float64, arrow.BinaryTypes.String,
		arrow.PrimitiveTypes.Int64, arrow.PrimitiveTypes.Int64,
	}
	if got := names(src.Schema()); got != "id,x,flag,arm,score,blank,big,spaced" {
		t.Fatalf("columns %s (byte-order mark kept?)", got)
	}
	for i, f := range src.Schema().Fields() {
		if !arrow.TypeEqual(f.Type, wantTypes[i]) {
			t.Errorf("column %s: type %v, want %v", f.Name, f.Type, wantTypes[i])
		}
	}
	var batches []arrow.RecordBatch
	var locs []Location
	for src.Next(context.Background()) {
		b := src.RecordBatch()
		b.Retain()
		batches = append(batches, b)
		locs = append(locs, src.Location())
	}
	if err := src.Err(); err != nil {
		t.Fatal(err)
	}
	defer func() {
		for _, b := range batches {
			b.Release()
		}
	}()
	if len(batches) != 2 || batches[0].NumRows() != 3 || batches[1].NumRows() != 1 {
		t.Fatalf("batches %v", batches)
	}
	if locs[0] != (Location{File: path, RowGroup: -1, Row: 0}) || locs[1] != (Location{File: path, RowGroup: -1, Row: 3}) {
		t.Errorf("locations %v", locs)
	}
	b0, b1 := batches[0], batches[1]
	if got := b0.Column(0).(*array.Int64).Int64Values(); got[2] != 3 || b1.Column(0).(*array.Int64).Value(0) != -4 {
		t.Errorf("id %v", got)
	}
	if x := b0.Column(1).(*array.Float64); !x.IsNull(1) || x.Value(2) != -2 || b1.Column(1).(*array.Float64).Value(0) != 1000 {
		t.Errorf("x %v %v", x, b1.Column(1))
	}
	if f := b0.Column(2).(*array.Boolean); !f.Value(0) || f.Value(1) || !f.Value(2) {
		t.Errorf("flag %v", f)
	}
	if a := b0.Column(3).(*array.String); a.Value(0) != "treated" || !a.IsNull(2) || b1.Column(3).(*array.String).Value(0) != "quoted, with comma" {
		t.Errorf("arm %v", a)
	}
	sc := b0.Column(4).(*array.Float64)
	if !math.IsNaN(sc.Value(0)) || !math.IsInf(sc.Value(1), 1) || !math.IsInf(sc.Value(2), -1) {
		t.Errorf("score %v", sc)
	}
	if n := b0.Column(5).NullN(); n != 3 {
		t.Errorf("blank has %d nulls, want 3", n)
	}
	if v := b0.Column(6).(*array.Int64).Value(0); v != math.MaxInt64 {
		t.Errorf("big %d", v)
	}
	if sp := b0.Column(7).(*array.Int64); sp.Value(0) != 3 || sp.Value(1) != 4 || !sp.IsNull(2) {
		t.Errorf("spaced %v", sp)
	}
}

func TestCSVInferTypes(t *testing.T) {
	tests := []struct {
		values []string
		want   arrow.DataType
	}{
		{[]string{"1", "2", ""}, arrow.PrimitiveTypes.Int64},
		{[]string{"1", "2.5"}, arrow.PrimitiveTypes.Float64},
		{[]string{"1", "nan", "-INF"}, arrow.PrimitiveTypes.Float64},
		{[]string{"9223372036854775808"}, arrow.PrimitiveTypes.Float64}, // beyond int64
		{[]string{"1e999"}, arrow.PrimitiveTypes.Float64},               // rounds to +Inf
		{[]string{"true", "FALSE", ""}, arrow.FixedWidthTypes.Boolean},
		{[]string{"1", "true"}, arrow.BinaryTypes.String},
		{[]string{"0x1F"}, arrow.BinaryTypes.String},
		{[]string{"1_000"}, arrow.BinaryTypes.String},
		{[]string{"yes", "no"}, arrow.BinaryTypes.String},
		{[]string{"", ""}, arrow.BinaryTypes.String},
		{nil, arrow.BinaryTypes.String},
	}
	for _, tt := range tests {
		rows := make([][]string, len(tt.values))
		for i, v := range tt.values {
			rows[i] = []string{v}
		}
		if got := inferCSV(rows, 0); !arrow.TypeEqual(got, tt.want) {
			t.Errorf("%q: %v, want %v", tt.values, got, tt.want)
		}
	}
}

func TestCSVErrors(t *testing.T) {
	tests := []struct {
		name    string
		body    string
		types   map[string]arrow.DataType
		columns []string
		column  string // the *Error's column
		row     int64  // the *Error's row
		msg     string // in the message
	}{
		{name: "empty file", body: "", row: -1, msg: "empty CSV"},
		{name: "ragged row", body: "a,b\n1,2\n3\n", row: 1, msg: "line 3"},
		{name: "bad quote", body: "a,b\n1,\"2\n", row: 0, msg: "line 2"},
		{name: "duplicate header", body: "a,b,a\n1,2,3\n", row: -1, column: "a", msg: "duplicate column name \"a\""},
		{name: "empty header name", body: "a,,c\n1,2,3\n", row: -1, msg: "column 2 has an empty name"},
		{name: "override does not parse", body: "id,dose\n1,2\n2,high\n", types: map[string]arrow.DataType{"dose": arrow.PrimitiveTypes.Int32}, column: "dose", row: 1, msg: "line 3"},
		{name: "override beyond int32", body: "id\n3000000000\n", types: map[string]arrow.DataType{"id": arrow.PrimitiveTypes.Int32}, column: "id", row: 0, msg: "out of range"},
		{name: "override of no column", body: "id\n1\n", types: map[string]arrow.DataType{"ID": arrow.PrimitiveTypes.Int64}, column: "ID", row: -1, msg: "names no column"},
		{name: "unsupported override", body: "id\n1\n", types: map[string]arrow.DataType{"id": arrow.FixedWidthTypes.Date32}, column: "id", row: -1, msg: "cannot be read as date32"},
		{name: "missing projected column", body: "id\n1\n", columns: []string{"arm"}, column: "arm", row: -1, msg: "no such column"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
			defer mem.AssertSize(t, 0)
			path := writeFile(t, "e.csv", tt.body)
			src, err := Open(context.Background(), Input{Path: path, Format: FormatCSV}, SourceOptions{Alloc: mem, CSVTypes: tt.types, Columns: tt.columns})
			if err == nil {
				err = drain(src)
				src.Close()
			}
			var e *Error
			if !errors.As(err, &e) {
				t.Fatalf("got %v, want an *Error", err)
			}
			if e.File != path || e.Column != tt.column || e.Row != tt.row || !strings.Contains(err.Error(), tt.msg) {
				t.Errorf("got %q (file %q column %q row %d), want column %q row %d and %q", err, e.File, e.Column, e.Row, tt.column, tt.row, tt.msg)
			}
		})
	}
}

func TestCSVTypeOverride(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	path := writeFile(t, "o.csv", "zip,dose,w\n02139,1,0.5\n10001,,2\n")
	types := map[string]arrow.DataType{"zip": arrow.BinaryTypes.String, "dose": arrow.PrimitiveTypes.Float32, "w": arrow.PrimitiveTypes.Float64}
	src, err := Open(context.Background(), Input{Path: path, Format: FormatCSV}, SourceOptions{Alloc: mem, CSVTypes: types})
	if err != nil {
		t.Fatal(err)
	}
	defer src.Close()
	if !src.Next(context.Background()) {
		t.Fatal(src.Err())
	}
	b := src.RecordBatch()
	if z := b.Column(0).(*array.String); z.Value(0) != "02139" {
		t.Errorf("zip %v", z)
	}
	if d := b.Column(1).(*array.Float32); d.Value(0) != 1 || !d.IsNull(1) {
		t.Errorf("dose %v", d)
	}
}
