package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"os"
	"strings"

	"github.com/heft-project/heft/pipeline"
)

// runDecode reads only the named columns of a file through heft's source
// and throws the batches away: the least a scorer must do to a table, and
// the baseline that the splice path of heft score adds a byte copy to.
func runDecode(args []string) error {
	fs := flag.NewFlagSet("decode", flag.ContinueOnError)
	in := fs.String("in", "", "input file (Parquet, Arrow IPC or CSV)")
	columns := fs.String("columns", "", "comma-separated columns to decode (empty: all)")
	batch := fs.Int("batch", 0, "rows per batch (0: the source's default)")
	if err := fs.Parse(args); err != nil {
		return err
	}
	if *in == "" {
		return errors.New("decode: -in is required")
	}
	var cols []string
	if *columns != "" {
		cols = strings.Split(*columns, ",")
	}
	ctx := context.Background()
	src, err := pipeline.Open(ctx, pipeline.Input{Path: *in}, pipeline.SourceOptions{Columns: cols, BatchRows: *batch})
	if err != nil {
		return err
	}
	var rows int64
	for src.Next(ctx) {
		rows += src.RecordBatch().NumRows()
	}
	err = errors.Join(src.Err(), src.Close())
	if err != nil {
		return err
	}
	fmt.Fprintf(os.Stderr, "%s: %d rows, %d columns decoded\n", *in, rows, len(src.Schema().Fields()))
	return nil
}
