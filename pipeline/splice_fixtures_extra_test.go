package pipeline

import (
	"fmt"
	"os"
	"testing"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"
	"github.com/apache/arrow-go/v18/parquet"
	"github.com/apache/arrow-go/v18/parquet/pqarrow"
)

// extraFixtures adds a table of 18 int64 columns in 20 row groups with a
// page index.
func extraFixtures() []spliceFixture {
	return []spliceFixture{{name: "wide many row groups", flat: true, pageIndex: true, write: func(t *testing.T, path string) int64 {
		var fs []arrow.Field
		for i := range 18 {
			fs = append(fs, arrow.Field{Name: fmt.Sprintf("c%d", i), Type: arrow.PrimitiveTypes.Int64, Nullable: i%2 == 1})
		}
		sc := arrow.NewSchema(fs, nil)
		b := array.NewRecordBuilder(memory.DefaultAllocator, sc)
		for i := range 2000 {
			for j := range 18 {
				bb := b.Field(j).(*array.Int64Builder)
				if j%2 == 1 && i%7 == 0 {
					bb.AppendNull()
				} else {
					bb.Append(int64(i * j))
				}
			}
		}
		rec := b.NewRecordBatch()
		tbl := array.NewTableFromRecords(sc, []arrow.RecordBatch{rec})
		f, _ := os.Create(path)
		err := pqarrow.WriteTable(tbl, f, 100, parquet.NewWriterProperties(parquet.WithPageIndexEnabled(true), parquet.WithMaxRowGroupLength(100)), pqarrow.DefaultWriterProps())
		if err != nil {
			t.Fatal(err)
		}
		f.Close()
		return 2000
	}}}
}

// mangledFixtures is every fixture but the empty one with its footer
// re-encoded in legal but unusual ways (see TestSpliceMangled).
func mangledFixtures() []spliceFixture {
	var out []spliceFixture
	for _, fx := range append(spliceFixtures(), extraFixtures()...) {
		if fx.name == "zero rows" {
			continue
		}
		fx := fx
		w := fx.write
		fx.name += " mangled"
		fx.write = func(t *testing.T, path string) int64 {
			rows := w(t, path+".orig")
			b, _ := os.ReadFile(path + ".orig")
			os.Remove(path + ".orig")
			fb := footerBytes(b)
			nb := mangle{true, true, true}.structAt(fb, 0, "root")
			nf := append(append([]byte{}, b[:len(b)-8-len(fb)]...), nb...)
			nf = append(nf, byte(len(nb)), byte(len(nb)>>8), byte(len(nb)>>16), byte(len(nb)>>24))
			nf = append(nf, "PAR1"...)
			os.WriteFile(path, nf, 0o644)
			return rows
		}
		out = append(out, fx)
	}
	return out
}
