package pipeline

import (
	"bytes"
	"context"
	"os"
	"path/filepath"
	"testing"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/ipc"
	"github.com/apache/arrow-go/v18/arrow/memory"
)

func TestArrowSinks(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	md := arrow.NewMetadata([]string{"heft.version"}, []string{"0.1.0"})
	in := testBatch(mem, 0, 300)

	target := filepath.Join(t.TempDir(), "out.arrow")
	fs, err := NewArrowFileSink(target, sinkSchema, ArrowSinkOptions{Alloc: mem, Metadata: md})
	if err != nil {
		t.Fatal(err)
	}
	var stream bytes.Buffer
	ss, err := NewArrowStreamSink(&stream, sinkSchema, ArrowSinkOptions{Alloc: mem, Metadata: md})
	if err != nil {
		t.Fatal(err)
	}
	for _, s := range []Committer{fs, ss} {
		if err := s.Write(context.Background(), in); err != nil {
			t.Fatal(err)
		}
		if err := s.Close(); err != nil {
			t.Fatal(err)
		}
	}

	f, err := os.Open(target)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	fr, err := ipc.NewFileReader(f)
	if err != nil {
		t.Fatal(err)
	}
	got, err := fr.RecordBatch(0)
	if err != nil {
		t.Fatal(err)
	}
	if !array.RecordEqual(got, in) {
		t.Error("Arrow file does not round-trip")
	}
	if v, _ := fr.Schema().Metadata().GetValue("heft.version"); v != "0.1.0" {
		t.Errorf("file metadata %v", fr.Schema().Metadata())
	}
	fr.Close()

	sr, err := ipc.NewReader(&stream)
	if err != nil {
		t.Fatal(err)
	}
	if !sr.Next() || !array.RecordEqual(sr.RecordBatch(), in) {
		t.Error("Arrow stream does not round-trip")
	}
	if v, _ := sr.Schema().Metadata().GetValue("heft.version"); v != "0.1.0" {
		t.Errorf("stream metadata %v", sr.Schema().Metadata())
	}
	sr.Release()
	in.Release()
	mem.AssertSize(t, 0) // the sinks hold nothing after Close

}
