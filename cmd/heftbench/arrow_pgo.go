package main

import (
	"errors"
	"fmt"
	"io"
	"os"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	pq "github.com/parquet-go/parquet-go"

	"github.com/heft-project/heft/pipeline"
)

// copyArrowToParquetGo reads with pqarrow and writes with parquet-go, fed
// column by column from the Arrow arrays (one goroutine).
func copyArrowToParquetGo(in, out string, ro readOpts, rg int64) (int64, error) {
	pr, rr, err := openArrow(in, ro)
	if err != nil {
		return 0, err
	}
	defer pr.Close()
	defer rr.Release()
	sc := rr.Schema()
	group := pq.Group{}
	for _, f := range sc.Fields() {
		var n pq.Node
		switch f.Type.ID() {
		case arrow.INT64:
			n = pq.Leaf(pq.Int64Type)
		case arrow.FLOAT64:
			n = pq.Leaf(pq.DoubleType)
		case arrow.STRING:
			n = pq.Encoded(pq.String(), &pq.RLEDictionary)
		case arrow.BOOL:
			n = pq.Leaf(pq.BooleanType)
		default:
			return 0, fmt.Errorf("column %q: type %s not handled by this path", f.Name, f.Type)
		}
		if f.Nullable {
			n = pq.Optional(n)
		}
		group[f.Name] = n
	}
	schema := pq.NewSchema("schema", group)
	o, err := os.Create(out)
	if err != nil {
		return 0, err
	}
	defer o.Close()
	if rg <= 0 {
		rg = pipeline.DefaultRowGroupRows
	}
	w := pq.NewGenericWriter[any](o, schema, pq.Compression(&pq.Snappy))
	leaf := make([]int, len(sc.Fields())) // parquet-go orders a group's fields by name
	for i, f := range sc.Fields() {
		lc, ok := schema.Lookup(f.Name)
		if !ok {
			return 0, errors.New("schema lookup failed")
		}
		leaf[i] = lc.ColumnIndex
	}
	var vals []pq.Value
	var rows, inGroup int64
	for rr.Next() {
		rec := rr.RecordBatch()
		n := int(rec.NumRows())
		if cap(vals) < n {
			vals = make([]pq.Value, n)
		}
		vals = vals[:n]
		cws := w.ColumnWriters()
		for i, col := range rec.Columns() {
			ci := leaf[i]
			def := 0
			if sc.Field(i).Nullable {
				def = 1
			}
			for r := 0; r < n; r++ {
				if col.IsNull(r) {
					vals[r] = pq.NullValue().Level(0, 0, ci)
					continue
				}
				var v pq.Value
				switch a := col.(type) {
				case *array.Int64:
					v = pq.Int64Value(a.Value(r))
				case *array.Float64:
					v = pq.DoubleValue(a.Value(r))
				case *array.String:
					v = pq.ByteArrayValue([]byte(a.Value(r)))
				case *array.Boolean:
					v = pq.BooleanValue(a.Value(r))
				}
				vals[r] = v.Level(0, def, ci)
			}
			if _, err := cws[ci].WriteRowValues(vals); err != nil {
				return rows, err
			}
		}
		rows += int64(n)
		inGroup += int64(n)
		if inGroup >= rg {
			if err := w.Flush(); err != nil {
				return rows, err
			}
			inGroup = 0
		}
	}
	if err := rr.Err(); err != nil && !errors.Is(err, io.EOF) {
		return rows, err
	}
	return rows, w.Close()
}
