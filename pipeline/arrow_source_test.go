package pipeline

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"testing"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/ipc"
	"github.com/apache/arrow-go/v18/arrow/memory"
)

// writeIPC writes recs as an Arrow IPC file (stream false) or stream.
func writeIPC(t testing.TB, path string, sc *arrow.Schema, stream bool, recs ...arrow.RecordBatch) []byte {
	t.Helper()
	var buf bytes.Buffer
	var (
		w interface {
			Write(arrow.RecordBatch) error
			Close() error
		}
		err error
	)
	if stream {
		w = ipc.NewWriter(&buf, ipc.WithSchema(sc))
	} else {
		w, err = ipc.NewFileWriter(&buf, ipc.WithSchema(sc))
		if err != nil {
			t.Fatal(err)
		}
	}
	for _, rec := range recs {
		if err := w.Write(rec); err != nil {
			t.Fatal(err)
		}
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	if path != "" {
		if err := os.WriteFile(path, buf.Bytes(), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	return buf.Bytes()
}

// arrowSchema is sampleSchema with metadata, as an Arrow writer would keep it.
func arrowSchema() *arrow.Schema {
	md := arrow.NewMetadata([]string{"source"}, []string{"nightly"})
	return arrow.NewSchema(sampleSchema.Fields(), &md)
}

func TestArrowSources(t *testing.T) {
	gen := memory.NewGoAllocator()
	// Stored batches of 7, 0 and 5 rows, written as one logical table.
	full := sampleRecord(gen, 0, 12)
	defer full.Release()
	sc := arrowSchema()
	parts := []arrow.RecordBatch{full.NewSlice(0, 7), full.NewSlice(7, 7), full.NewSlice(7, 12)}
	for i, p := range parts {
		parts[i] = array.NewRecordBatch(sc, p.Columns(), p.NumRows())
		p.Release()
	}
	defer func() {
		for _, p := range parts {
			p.Release()
		}
	}()
	dir := t.TempDir()
	filePath := filepath.Join(dir, "t.arrow")
	streamPath := filepath.Join(dir, "t.arrows")
	writeIPC(t, filePath, sc, false, parts...)
	streamBytes := writeIPC(t, streamPath, sc, true, parts...)

	tests := []struct {
		name      string
		in        Input
		batchRows int
		columns   []string
		wantRows  []int64 // Location().Row of each batch
	}{
		{"file, stored batches", Input{Path: filePath, Format: FormatArrowFile}, 0, nil, []int64{0, 7}},
		{"file, cut to 3 rows", Input{Path: filePath, Format: FormatArrowFile}, 3, nil, []int64{0, 3, 6, 7, 10}},
		{"stream", Input{Path: streamPath, Format: FormatArrowStream}, 0, nil, []int64{0, 7}},
		{"stream projected", Input{Path: streamPath, Format: FormatArrowStream}, 4, []string{"d", "f64"}, []int64{0, 4, 7, 11}},
		{"stdin", Input{Path: Stdin, Format: FormatArrowStream, Size: -1}, 0, nil, []int64{0, 7}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
			defer mem.AssertSize(t, 0)
			opt := SourceOptions{Alloc: mem, BatchRows: tt.batchRows, Columns: tt.columns, Stdin: bytes.NewReader(streamBytes)}
			src, err := Open(context.Background(), tt.in, opt)
			if err != nil {
				t.Fatal(err)
			}
			defer src.Close()
			wantCols := "i32,i64,f32,f64,b,s,d"
			if tt.columns != nil {
				wantCols = "f64,d"
			}
			if got := names(src.Schema()); got != wantCols {
				t.Fatalf("columns %s, want %s", got, wantCols)
			}
			if m, ok := src.(MetadataSource); !ok {
				t.Error("no MetadataSource")
			} else if v, _ := m.Metadata().GetValue("source"); v != "nightly" {
				t.Errorf("metadata %v", m.Metadata())
			}
			var rows []int64
			for _, loc := range readAll(t, src, full) {
				if loc.File != tt.in.Path || loc.RowGroup != -1 {
					t.Errorf("location %v", loc)
				}
				rows = append(rows, loc.Row)
			}
			if fmt.Sprint(rows) != fmt.Sprint(tt.wantRows) {
				t.Errorf("batch rows at %v, want %v", rows, tt.wantRows)
			}
		})
	}
}

func TestArrowDuplicateColumns(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	sc := arrow.NewSchema([]arrow.Field{
		{Name: "x", Type: arrow.PrimitiveTypes.Int64},
		{Name: "y", Type: arrow.PrimitiveTypes.Int64},
		{Name: "x", Type: arrow.PrimitiveTypes.Float64},
	}, nil)
	path := filepath.Join(t.TempDir(), "dup.arrow")
	writeIPC(t, path, sc, false)
	_, err := Open(context.Background(), Input{Path: path, Format: FormatArrowFile}, SourceOptions{Alloc: mem})
	var e *Error
	if !errors.As(err, &e) || e.File != path || e.Column != "x" {
		t.Fatalf("got %v, want an *Error naming %s and column x", err, path)
	}
}

func TestArrowBadFiles(t *testing.T) {
	rec := sampleRecord(memory.NewGoAllocator(), 0, 40)
	defer rec.Release()
	good := writeIPC(t, "", sampleSchema, false, rec.NewSlice(0, 20), rec.NewSlice(20, 40))
	goodStream := writeIPC(t, "", sampleSchema, true, rec.NewSlice(0, 20), rec.NewSlice(20, 40))
	tests := []struct {
		name   string
		format Format
		bytes  []byte
	}{
		{"empty file", FormatArrowFile, nil},
		{"empty stream", FormatArrowStream, nil},
		{"parquet named .arrow", FormatArrowFile, []byte("PAR1 not arrow at all PAR1")},
		{"file truncated", FormatArrowFile, good[:len(good)*2/3]},
		{"stream truncated", FormatArrowStream, goodStream[:len(goodStream)*2/3]},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
			defer mem.AssertSize(t, 0)
			path := filepath.Join(t.TempDir(), "bad")
			if err := os.WriteFile(path, tt.bytes, 0o644); err != nil {
				t.Fatal(err)
			}
			err := openDrainClose(Input{Path: path, Format: tt.format}, mem)
			var e *Error
			if !errors.As(err, &e) || e.File != path {
				t.Fatalf("got %v (%T), want an *Error naming the file", err, err)
			}
		})
	}
	// Flipped bytes: an *Error naming the file or a clean read, no panic.
	// A clean read must release everything. A failed one may not: when
	// arrow-go's IPC reader recovers a decoding panic itself it drops the
	// message body unreleased. That memory comes from the Go allocator
	// (memory.DefaultAllocator) and is collected, so it is not asserted.
	for _, tt := range []struct {
		name   string
		format Format
		bytes  []byte
	}{{"file", FormatArrowFile, good}, {"stream", FormatArrowStream, goodStream}} {
		t.Run("flipped byte in a "+tt.name, func(t *testing.T) {
			path := filepath.Join(t.TempDir(), "flip")
			errs := 0
			for off := 0; off < len(tt.bytes); off += max(1, len(tt.bytes)/150) {
				b := append([]byte(nil), tt.bytes...)
				b[off] ^= 0xa5
				if err := os.WriteFile(path, b, 0o644); err != nil {
					t.Fatal(err)
				}
				mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
				err := openDrainClose(Input{Path: path, Format: tt.format}, mem)
				if err == nil {
					if n := mem.CurrentAlloc(); n != 0 {
						t.Fatalf("offset %d: clean read left %d bytes allocated", off, n)
					}
					continue
				}
				errs++
				var e *Error
				if !errors.As(err, &e) || e.File != path {
					t.Fatalf("offset %d: got %v (%T), want an *Error naming the file", off, err, err)
				}
			}
			if errs == 0 {
				t.Error("no flipped byte was detected")
			}
		})
	}
}

func openDrainClose(in Input, mem memory.Allocator) error {
	src, err := Open(context.Background(), in, SourceOptions{Alloc: mem})
	if err != nil {
		return err
	}
	err = drain(src)
	if cerr := src.Close(); err == nil {
		err = cerr
	}
	return err
}
