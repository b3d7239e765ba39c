package pipeline

import (
	"context"
	"os"
	"path/filepath"
	"testing"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"
	"github.com/apache/arrow-go/v18/parquet"
)

// TestSpliceSpillAbort: an abort in the middle of a spilled row group, a
// Close with too few rows and a Write with too many leave no temporary
// file and no allocated bytes.
func TestSpliceSpillAbort(t *testing.T) {
	for _, mode := range []string{"abort", "close-short", "too-many"} {
		t.Run(mode, func(t *testing.T) {
			dir := t.TempDir()
			in, out := filepath.Join(dir, "in.parquet"), filepath.Join(dir, "out.parquet")
			writeWithPqarrow(t, in, sinkSchema, testBatch, 3000, parquet.WithMaxRowGroupLength(1000))
			plan, err := PlanSplice(in)
			if err != nil {
				t.Fatal(err)
			}
			mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
			s, err := NewSpliceSink(out, plan, appendedSchema, SpliceOptions{SpillRows: 100, Alloc: mem})
			if err != nil {
				t.Fatal(err)
			}
			n := int64(1500)
			if mode == "too-many" {
				n = 3500
			}
			var werr error
			for start := int64(0); start < n; start += 333 {
				app := appendedBatch(mem, start, min(333, n-start))
				rec := array.NewRecordBatch(appendedSchema, app.Columns(), app.NumRows())
				app.Release()
				werr = s.Write(context.Background(), rec)
				rec.Release()
				if werr != nil {
					break
				}
			}
			t.Logf("write err: %v", werr)
			ents, _ := os.ReadDir(dir)
			t.Logf("files before end: %d", len(ents))
			if mode == "abort" {
				s.Abort()
			} else {
				t.Logf("close: %v", s.Close())
			}
			ents, _ = os.ReadDir(dir)
			for _, e := range ents {
				if e.Name() != "in.parquet" {
					t.Errorf("left behind: %s", e.Name())
				}
			}
			if got := mem.CurrentAlloc(); got != 0 {
				t.Errorf("allocator holds %d bytes after %s", got, mode)
			}
		})
	}
	_ = arrow.PrimitiveTypes.Float64
}
