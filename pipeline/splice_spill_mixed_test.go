package pipeline

import (
	"path/filepath"
	"testing"

	"github.com/apache/arrow-go/v18/parquet"
)

// TestSpliceMixedSpill: a file whose row groups are spilled and encoded in
// memory in turn reads as one encoded all in memory, seeks included.
func TestSpliceMixedSpill(t *testing.T) {
	dir := t.TempDir()
	in := filepath.Join(dir, "in.parquet")
	writeWithPqarrow(t, in, sinkSchema, testBatch, 3500, parquet.WithMaxRowGroupLength(1000), parquet.WithPageIndexEnabled(true))
	a, b := filepath.Join(dir, "a.parquet"), filepath.Join(dir, "b.parquet")
	spliceWith(t, in, a, 3500, appendedSchema, SpliceOptions{})
	spliceWith(t, in, b, 3500, appendedSchema, SpliceOptions{SpillRows: 700})
	ta, tb := readTable(t, a), readTable(t, b)
	defer ta.Release()
	defer tb.Release()
	for i := 0; i < int(ta.NumCols()); i++ {
		if !sameValues(t, ta.Column(i).Data(), tb.Column(i).Data()) {
			t.Fatalf("col %d differs", i)
		}
	}
	checkWithParquetGo(t, in, b, true)
	checkSeekWithArrow(t, in, b, 3500)
}
