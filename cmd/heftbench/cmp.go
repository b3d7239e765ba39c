package main

import (
	"errors"
	"flag"
	"fmt"
	"io"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
)

// runCmp checks that two Parquet files hold the same rows, so a fast copy
// path is not fast because it dropped something.
func runCmp(args []string) error {
	fs := flag.NewFlagSet("cmp", flag.ContinueOnError)
	a := fs.String("a", "", "first Parquet file")
	b := fs.String("b", "", "second Parquet file")
	if err := fs.Parse(args); err != nil {
		return err
	}
	const batch = 65536 // same batch size on both sides, so batches line up
	pa, ra, err := openArrow(*a, readOpts{batch: batch})
	if err != nil {
		return err
	}
	defer pa.Close()
	defer ra.Release()
	pb, rb, err := openArrow(*b, readOpts{batch: batch})
	if err != nil {
		return err
	}
	defer pb.Close()
	defer rb.Release()
	var rows int64
	for {
		na, nb := ra.Next(), rb.Next()
		if na != nb {
			return fmt.Errorf("row counts differ after %d rows", rows)
		}
		if !na {
			break
		}
		x, y := ra.RecordBatch(), rb.RecordBatch()
		if x.NumCols() != y.NumCols() {
			return errors.New("column counts differ")
		}
		for i := range int(x.NumCols()) {
			name := x.Schema().Field(i).Name
			j := y.Schema().FieldIndices(name) // parquet-go orders columns by name
			if len(j) != 1 {
				return fmt.Errorf("column %q missing from %s", name, *b)
			}
			if !sameValues(x.Column(i), y.Column(j[0])) {
				return fmt.Errorf("column %q differs in the batch at row %d", x.Schema().Field(i).Name, rows)
			}
		}
		rows += x.NumRows()
	}
	for _, err := range []error{ra.Err(), rb.Err()} {
		if err != nil && !errors.Is(err, io.EOF) {
			return err
		}
	}
	fmt.Printf("same: %d rows\n", rows)
	return nil
}

// sameValues compares two columns; a dictionary column equals a plain one
// holding the same values.
func sameValues(a, b arrow.Array) bool {
	if arrow.TypeEqual(a.DataType(), b.DataType()) {
		return array.Equal(a, b)
	}
	if a.Len() != b.Len() {
		return false
	}
	for i := range a.Len() {
		if a.IsNull(i) != b.IsNull(i) || (a.IsValid(i) && a.ValueStr(i) != b.ValueStr(i)) {
			return false
		}
	}
	return true
}
