package pipeline

import (
	"bytes"
	"context"
	"encoding/base64"
	"encoding/binary"
	"errors"
	"io"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"
	"github.com/apache/arrow-go/v18/parquet"
	"github.com/apache/arrow-go/v18/parquet/pqarrow"
	flatbuffers "github.com/google/flatbuffers/go"
)

func TestGuard(t *testing.T) {
	tests := []struct {
		name      string
		f         func() error
		malformed bool
		wrapped   error
	}{
		{"nil", func() error { return nil }, false, nil},
		{"error", func() error { return io.ErrUnexpectedEOF }, false, io.ErrUnexpectedEOF},
		{"index panic", func() error {
			var s []int
			_ = s[3]
			return nil
		}, true, nil},
		{"value panic", func() error { panic("bad page") }, true, nil},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			err := guard("f.parquet", tt.f)
			if tt.wrapped == nil && !tt.malformed {
				if err != nil {
					t.Fatal(err)
				}
				return
			}
			var e *Error
			if !errors.As(err, &e) || e.File != "f.parquet" || e.RowGroup != -1 || e.Row != -1 {
				t.Fatalf("got %#v", err)
			}
			if errors.Is(err, ErrMalformed) != tt.malformed {
				t.Errorf("errors.Is(ErrMalformed) = %v", !tt.malformed)
			}
			if tt.wrapped != nil && !errors.Is(err, tt.wrapped) {
				t.Errorf("%v does not wrap %v", err, tt.wrapped)
			}
		})
	}
	// An *Error from deeper keeps its location.
	inner := &Error{File: "f.parquet", RowGroup: 2, Row: 10, Column: "x", Err: io.EOF}
	var e *Error
	if err := guard("f.parquet", func() error { return inner }); !errors.As(err, &e) || e.RowGroup != 2 || e.Column != "x" {
		t.Errorf("location lost: %v", err)
	}
}

// fuzzOpen writes data to a file of format f and reads it all: any outcome
// but a panic is fine, and errors must be *Error naming the file.
func fuzzOpen(t *testing.T, f Format, data []byte) {
	path := filepath.Join(t.TempDir(), "fuzz")
	if err := os.WriteFile(path, data, 0o644); err != nil {
		t.Fatal(err)
	}
	err := openDrainClose(Input{Path: path, Format: f}, memory.NewGoAllocator())
	var e *Error
	if err != nil && (!errors.As(err, &e) || e.File != path) {
		t.Fatalf("got %v (%T), want an *Error naming the file", err, err)
	}
}

// FuzzParquetSource: go test ./pipeline -run '^$' -fuzz FuzzParquetSource -fuzztime 60s
func FuzzParquetSource(f *testing.F) {
	rec := sampleRecord(memory.NewGoAllocator(), 0, 30)
	defer rec.Release()
	path := filepath.Join(f.TempDir(), "seed.parquet")
	writeParquet(f, path, sampleSchema, 10, rec)
	seed, err := os.ReadFile(path)
	if err != nil {
		f.Fatal(err)
	}
	f.Add(seed)
	f.Add(seed[:len(seed)/2])
	f.Fuzz(func(t *testing.T, data []byte) { fuzzOpen(t, FormatParquet, data) })
}

// FuzzArrowSource: go test ./pipeline -run '^$' -fuzz FuzzArrowSource -fuzztime 60s
func FuzzArrowSource(f *testing.F) {
	rec := sampleRecord(memory.NewGoAllocator(), 0, 30)
	defer rec.Release()
	f.Add(writeIPC(f, "", sampleSchema, false, rec), false)
	f.Add(writeIPC(f, "", sampleSchema, true, rec), true)
	f.Fuzz(func(t *testing.T, data []byte, stream bool) {
		format := FormatArrowFile
		if stream {
			format = FormatArrowStream
		}
		fuzzOpen(t, format, data)
	})
}

// fbRoot is the root table of a flatbuffer.
func fbRoot(fb []byte) flatbuffers.Table {
	return flatbuffers.Table{Bytes: fb, Pos: flatbuffers.GetUOffsetT(fb)}
}

// fbSub follows the sub-table in a vtable slot.
func fbSub(t flatbuffers.Table, slot flatbuffers.VOffsetT) flatbuffers.Table {
	o := flatbuffers.UOffsetT(t.Offset(slot))
	return flatbuffers.Table{Bytes: t.Bytes, Pos: t.Indirect(o + t.Pos)}
}

// hugeFieldCount returns a copy of an IPC stream whose schema message
// claims 2^31-1 fields: arrow-go would allocate them all and die.
func hugeFieldCount(t *testing.T, stream []byte) []byte {
	t.Helper()
	b := append([]byte(nil), stream...)
	fb := b[8:]
	sc := fbSub(fbRoot(fb), fbMessageHeader)
	o := flatbuffers.UOffsetT(sc.Offset(fbSchemaFields))
	if o == 0 {
		t.Fatal("schema without fields")
	}
	at := sc.Pos + o
	at += sc.GetUOffsetT(at)
	binary.LittleEndian.PutUint32(fb[at:], 0x7fffffff)
	return b
}

// TestCorruptArrowSchemaCounts: a count too large for its bytes must be an
// error, in every place an Arrow schema is read. Before the checks, each of
// these cases ended the process out of memory.
func TestCorruptArrowSchemaCounts(t *testing.T) {
	rec := sampleRecord(memory.NewGoAllocator(), 0, 10)
	defer rec.Release()
	stream := writeIPC(t, "", sampleSchema, true, rec)
	bad := hugeFieldCount(t, stream)
	n := int(binary.LittleEndian.Uint32(bad[4:]))
	if err := checkIPCMessage(bad[:8+n]); !errors.Is(err, ErrMalformed) {
		t.Fatalf("checkIPCMessage = %v, want ErrMalformed", err)
	}
	if err := checkIPCMessage(stream[:8+n]); err != nil {
		t.Fatalf("good schema message: %v", err)
	}

	dir := t.TempDir()
	// An Arrow stream file and standard input.
	streamPath := filepath.Join(dir, "bad.arrows")
	if err := os.WriteFile(streamPath, bad, 0o644); err != nil {
		t.Fatal(err)
	}
	// A Parquet file whose ARROW:schema entry holds the bad message.
	pqPath := filepath.Join(dir, "bad.parquet")
	md := arrow.NewMetadata([]string{arrowSchemaKey}, []string{base64.StdEncoding.EncodeToString(bad[:8+n])})
	plain := arrow.NewSchema([]arrow.Field{{Name: "x", Type: arrow.PrimitiveTypes.Int64}}, &md)
	bld := array.NewInt64Builder(memory.NewGoAllocator())
	bld.AppendValues([]int64{1, 2}, nil)
	col := bld.NewArray()
	bld.Release()
	defer col.Release()
	prec := array.NewRecordBatch(plain, []arrow.Array{col}, 2)
	defer prec.Release()
	f, err := os.Create(pqPath)
	if err != nil {
		t.Fatal(err)
	}
	w, err := pqarrow.NewFileWriter(plain, f, parquet.NewWriterProperties(), pqarrow.DefaultWriterProps())
	if err != nil {
		t.Fatal(err)
	}
	if err := w.Write(prec); err != nil {
		t.Fatal(err)
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}

	for _, in := range []Input{
		{Path: streamPath, Format: FormatArrowStream},
		{Path: Stdin, Format: FormatArrowStream},
		{Path: pqPath, Format: FormatParquet},
	} {
		t.Run(in.Path, func(t *testing.T) {
			mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
			defer mem.AssertSize(t, 0)
			_, err := Open(context.Background(), in, SourceOptions{Alloc: mem, Stdin: bytes.NewReader(bad)})
			var e *Error
			if !errors.As(err, &e) || e.File != in.Path || !errors.Is(err, ErrMalformed) {
				t.Fatalf("got %v, want an *Error for %s wrapping ErrMalformed", err, in.Path)
			}
		})
	}
}

// A damaged body length in an IPC stream must be refused by the size
// limit, not allocated: ipc.NewReader drops its limits, so the source
// builds its own message reader.
func TestIPCStreamBodyLimit(t *testing.T) {
	rec := sampleRecord(memory.NewGoAllocator(), 0, 10)
	defer rec.Release()
	b := writeIPC(t, "", sampleSchema, true, rec)
	first := 8 + int(binary.LittleEndian.Uint32(b[4:]))
	fb := b[first+8:]
	msg := fbRoot(fb)
	o := flatbuffers.UOffsetT(msg.Offset(10)) // Message.bodyLength
	if o == 0 {
		t.Fatal("second message has no body length")
	}
	binary.LittleEndian.PutUint64(fb[msg.Pos+o:], 1<<50)
	path := filepath.Join(t.TempDir(), "body.arrows")
	if err := os.WriteFile(path, b, 0o644); err != nil {
		t.Fatal(err)
	}
	for _, in := range []Input{{Path: path, Format: FormatArrowStream}, {Path: Stdin, Format: FormatArrowStream}} {
		mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
		src, err := Open(context.Background(), in, SourceOptions{Alloc: mem, Stdin: bytes.NewReader(b)})
		if err == nil {
			err = drain(src)
			src.Close()
		}
		var e *Error
		if !errors.As(err, &e) || e.File != in.Path || !strings.Contains(err.Error(), "exceeds limit") {
			t.Errorf("got %v, want an *Error for %s about the size limit", err, in.Path)
		}
	}
}
