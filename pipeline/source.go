package pipeline

import (
	"context"

	"github.com/apache/arrow-go/v18/arrow"
)

// Location says where a batch came from: the file, the row group (-1 for
// formats without them) and the file-relative index of the batch's first row.
// Before the first Next it names the file, so that errors about the schema
// can too.
type Location struct {
	File     string
	RowGroup int
	Row      int64
}

// Source hands out record batches one at a time, in file order, in the shape
// of bufio.Scanner: call Next until it returns false, then check Err once.
//
//	for src.Next(ctx) {
//		rec := src.RecordBatch() // valid until the next call to Next; Retain to keep it
//		...
//	}
//	if err := src.Err(); err != nil { ... }
//
// Errors returned by Err are *Error values naming the file and, where known,
// the row group, row and column.
type Source interface {
	Schema() *arrow.Schema
	Next(ctx context.Context) bool
	RecordBatch() arrow.RecordBatch
	Location() Location
	Err() error
	Close() error
}
