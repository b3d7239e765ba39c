package main

import (
	"context"
	"flag"
	"fmt"
	"math/rand/v2"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"

	"github.com/heft-project/heft/pipeline"
)

// benchSchema is shaped like a warehouse table heft scores: an id, a
// treatment flag, two low-cardinality categoricals and twelve numeric
// covariates/outcomes. The data are invented, for timing only.
func benchSchema() *arrow.Schema {
	f := []arrow.Field{
		{Name: "id", Type: arrow.PrimitiveTypes.Int64},
		{Name: "treated", Type: arrow.FixedWidthTypes.Boolean, Nullable: true},
		{Name: "region", Type: arrow.BinaryTypes.String, Nullable: true},
		{Name: "channel", Type: arrow.BinaryTypes.String, Nullable: true},
	}
	for i := range 8 {
		f = append(f, arrow.Field{Name: fmt.Sprintf("x%d", i), Type: arrow.PrimitiveTypes.Float64, Nullable: true})
	}
	for i := range 4 {
		f = append(f, arrow.Field{Name: fmt.Sprintf("n%d", i), Type: arrow.PrimitiveTypes.Int64, Nullable: true})
	}
	return arrow.NewSchema(f, nil)
}

var (
	regions  = []string{"north", "south", "east", "west", "central", "coastal", "mountain", "plains", "islands", "metro", "rural", "suburban"}
	channels = []string{"web", "store", "phone", "partner", "mail", "app", "kiosk", "agent", "event", "referral", "email", "social", "tv", "radio", "print", "other", "unknown"}
)

func runGen(args []string) error {
	fs := flag.NewFlagSet("gen", flag.ContinueOnError)
	out := fs.String("out", "bench.parquet", "output Parquet file")
	rows := fs.Int64("rows", 2_000_000, "rows")
	batch := fs.Int("batch", 65536, "rows per batch")
	seed := fs.Uint64("seed", 1, "random seed")
	if err := fs.Parse(args); err != nil {
		return err
	}
	sc := benchSchema()
	sink, err := pipeline.NewParquetSink(*out, sc, pipeline.ParquetSinkOptions{CreatedBy: "heftbench"})
	if err != nil {
		return err
	}
	rng := rand.New(rand.NewPCG(*seed, 7))
	b := array.NewRecordBuilder(memory.DefaultAllocator, sc)
	defer b.Release()
	for done := int64(0); done < *rows; {
		n := min(int64(*batch), *rows-done)
		for i := int64(0); i < n; i++ {
			b.Field(0).(*array.Int64Builder).Append(done + i)
			b.Field(1).(*array.BooleanBuilder).Append(rng.Float64() < 0.3)
			b.Field(2).(*array.StringBuilder).Append(regions[rng.IntN(len(regions))])
			b.Field(3).(*array.StringBuilder).Append(channels[rng.IntN(len(channels))])
			for j := range 8 {
				fb := b.Field(4 + j).(*array.Float64Builder)
				if rng.IntN(100) == 0 {
					fb.AppendNull()
				} else {
					fb.Append(rng.NormFloat64()*float64(j+1) + float64(j))
				}
			}
			for j := range 4 {
				b.Field(12 + j).(*array.Int64Builder).Append(rng.Int64N(int64(1000 * (j + 1))))
			}
		}
		rec := b.NewRecordBatch()
		err := sink.Write(context.Background(), rec)
		rec.Release()
		if err != nil {
			sink.Abort()
			return err
		}
		done += n
	}
	return sink.Close()
}
