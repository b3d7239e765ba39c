// Command fitgen writes the fit benchmark's table: N rows × K numeric terms
// and a binary treatment from a known logistic model, both as Parquet (for
// heft) and as raw little-endian float64 (for the reference fit in numpy and
// statsmodels, which reads it with numpy.fromfile). Invented data.
package main

import (
	"bufio"
	"encoding/binary"
	"flag"
	"fmt"
	"log"
	"math"
	"math/rand/v2"
	"os"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"
	"github.com/apache/arrow-go/v18/parquet"
	"github.com/apache/arrow-go/v18/parquet/compress"
	"github.com/apache/arrow-go/v18/parquet/pqarrow"
)

func main() {
	rows := flag.Int("rows", 1_000_000, "rows")
	k := flag.Int("terms", 20, "numeric terms")
	out := flag.String("parquet", "fit.parquet", "Parquet output")
	raw := flag.String("raw", "fit.f64", "raw float64 output: row-major, K term columns then the treatment")
	flag.Parse()
	if err := write(*rows, *k, *out, *raw); err != nil {
		log.Fatal(err)
	}
}

func write(rows, k int, out, raw string) error {
	fields := make([]arrow.Field, 0, k+1)
	for j := 0; j < k; j++ {
		fields = append(fields, arrow.Field{Name: fmt.Sprintf("x%d", j+1), Type: arrow.PrimitiveTypes.Float64})
	}
	fields = append(fields, arrow.Field{Name: "t", Type: arrow.PrimitiveTypes.Int8})
	schema := arrow.NewSchema(fields, nil)
	pf, err := os.Create(out)
	if err != nil {
		return err
	}
	defer pf.Close()
	w, err := pqarrow.NewFileWriter(schema, pf, parquet.NewWriterProperties(parquet.WithCompression(compress.Codecs.Snappy), parquet.WithMaxRowGroupLength(131072)), pqarrow.DefaultWriterProps())
	if err != nil {
		return err
	}
	rf, err := os.Create(raw)
	if err != nil {
		return err
	}
	defer rf.Close()
	bw := bufio.NewWriterSize(rf, 1<<20)
	r := rand.New(rand.NewPCG(7, 11))
	beta := make([]float64, k)
	for j := range beta {
		beta[j] = 0.3 * math.Sin(float64(j+1))
	}
	b := array.NewRecordBuilder(memory.DefaultAllocator, schema)
	defer b.Release()
	var buf [8]byte
	x := make([]float64, k)
	for done := 0; done < rows; {
		n := min(65536, rows-done)
		for i := 0; i < n; i++ {
			lp := -0.2
			for j := range x {
				x[j] = r.NormFloat64()
				lp += beta[j] * x[j]
				b.Field(j).(*array.Float64Builder).Append(x[j])
				binary.LittleEndian.PutUint64(buf[:], math.Float64bits(x[j]))
				bw.Write(buf[:])
			}
			t := int8(0)
			if r.Float64() < 1/(1+math.Exp(-lp)) {
				t = 1
			}
			b.Field(k).(*array.Int8Builder).Append(t)
			binary.LittleEndian.PutUint64(buf[:], math.Float64bits(float64(t)))
			bw.Write(buf[:])
		}
		rec := b.NewRecordBatch()
		err := w.Write(rec)
		rec.Release()
		if err != nil {
			return err
		}
		done += n
	}
	if err := w.Close(); err != nil {
		return err
	}
	return bw.Flush()
}
