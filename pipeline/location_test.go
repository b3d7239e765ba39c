package pipeline

import (
	"context"
	"path/filepath"
	"testing"

	"github.com/apache/arrow-go/v18/arrow/memory"
)

// Before the first Next, Location names the file: a caller checking the
// schema (fit's sample reader) has a file to put in its errors. Found by
// fit's FuzzCSVSample.
func TestLocationBeforeNext(t *testing.T) {
	rec := sampleRecord(memory.NewGoAllocator(), 0, 5)
	defer rec.Release()
	dir := t.TempDir()
	pq := filepath.Join(dir, "a.parquet")
	writeParquet(t, pq, sampleSchema, 10, rec)
	arrowFile := filepath.Join(dir, "a.arrow")
	writeIPC(t, arrowFile, sampleSchema, false, rec)
	csv := writeFile(t, "a.csv", "x,y\n1,2\n")
	for _, in := range []Input{{Path: pq, Format: FormatParquet}, {Path: arrowFile, Format: FormatArrowFile}, {Path: csv, Format: FormatCSV}} {
		src, err := Open(context.Background(), in, SourceOptions{})
		if err != nil {
			t.Fatal(err)
		}
		if got := src.Location().File; got != in.Path {
			t.Errorf("%v: Location().File before Next is %q", in.Format, got)
		}
		src.Close()
	}
}
