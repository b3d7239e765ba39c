package pipeline

import (
	"encoding/binary"
	"os"
	"path/filepath"
	"slices"
	"testing"

	"github.com/apache/arrow-go/v18/parquet"
	"github.com/apache/arrow-go/v18/parquet/file"
)

// TestSpliceEmptyColumnOrders: an input whose footer has an empty
// column_orders list (not one per leaf) keeps it as it is, rather than
// getting orders for the appended columns paired with its first columns.
func TestSpliceEmptyColumnOrders(t *testing.T) {
	dir := t.TempDir()
	in0, in, out := filepath.Join(dir, "in0.parquet"), filepath.Join(dir, "in.parquet"), filepath.Join(dir, "out.parquet")
	writeWithPqarrow(t, in0, sinkSchema, testBatch, 1000, parquet.WithMaxRowGroupLength(500))
	b, _ := os.ReadFile(in0)
	fb := footerBytes(b)
	nb, err := rewriteStruct(fb, 0, func(w *rawWriter, f rawField) (bool, error) {
		if f.id == 7 {
			w.list(7, ctStruct, nil)
			return true, nil
		}
		return false, nil
	}, nil)
	if err != nil {
		t.Fatal(err)
	}
	nf := append(slices.Clone(b[:len(b)-8-len(fb)]), nb...)
	nf = binary.LittleEndian.AppendUint32(nf, uint32(len(nb)))
	nf = append(nf, "PAR1"...)
	os.WriteFile(in, nf, 0o644)
	func() {
		defer func() { t.Logf("input open recover: %v", recover()) }()
		pf, err := file.OpenParquetFile(in, false)
		t.Logf("arrow-go opens input: %v", err)
		if err == nil {
			pf.Close()
		}
	}()
	spliceWith(t, in, out, 1000, appendedSchema, SpliceOptions{})
	m := readFooter(t, mustRead(t, out))
	if n := len(m.ColumnOrders); n != 0 && n != len(m.RowGroups[0].Columns) {
		t.Fatalf("output column orders: %d for %d leaves; want the input's empty list kept or one per leaf", n, len(m.RowGroups[0].Columns))
	}
	func() {
		defer func() { t.Logf("output open recover: %v", recover()) }()
		pf, err := file.OpenParquetFile(out, false)
		t.Logf("arrow-go opens output: %v", err)
		if err == nil {
			pf.Close()
		}
	}()
}
