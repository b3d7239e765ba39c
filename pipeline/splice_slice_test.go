package pipeline

import (
	"bytes"
	"context"
	"os"
	"path/filepath"
	"testing"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
)

// spliceSlice splices the row groups r of in to out, appending the rows of
// appendedBatch that the whole file's splice would give them, with the
// plan of PlanSpliceRange when ranged, else that of PlanSplice sliced.
func spliceSlice(t *testing.T, in, out string, r RowGroupRange, schema *arrow.Schema, ranged bool) (start, rows int64) {
	t.Helper()
	whole, err := PlanSplice(in)
	if err != nil {
		t.Fatal(err)
	}
	plan, err := whole.Slice(r)
	if ranged {
		plan, err = PlanSpliceRange(in, r)
	}
	if err != nil {
		t.Fatal(err)
	}
	for i, n := range whole.RowGroupRows() {
		if i < r.First {
			start += n
		} else if i < r.First+r.N {
			rows += n
		}
	}
	splicePlanned(t, plan, out, start, rows, schema, SpliceOptions{})
	return start, rows
}

// TestSpliceSlices splices ranges of row groups, the unit of work when one
// large file is split across workers: each slice's file must hold exactly
// its row groups, every input column chunk byte-identical to the same row group
// of the whole file's splice (so a table split into slices is the whole
// table, bytes and all), its footer counting the slice's rows, and it must
// read back with arrow-go and parquet-go. A source reading the same range
// gives the same rows, located at the file's own row numbers.
func TestSpliceSlices(t *testing.T) {
	for _, fx := range spliceFixtures() {
		t.Run(fx.name, func(t *testing.T) {
			dir := t.TempDir()
			in, whole := filepath.Join(dir, "in.parquet"), filepath.Join(dir, "whole.parquet")
			total := fx.write(t, in)
			schema := appendedSchema
			if fx.renamed {
				schema = renamedSchema
			}
			splice(t, in, whole, total, schema)
			plan, err := PlanSplice(in)
			if err != nil {
				t.Fatal(err)
			}
			n := len(plan.RowGroupRows())
			if n < 2 {
				t.Skipf("%d row groups", n)
			}
			wholeBytes := mustRead(t, whole)
			wm := readFooter(t, wholeBytes)
			twhole := readTable(t, whole)
			defer twhole.Release()
			ranges := []RowGroupRange{{First: 0, N: 1}, {First: n - 1, N: 1}, {First: 1, N: n - 1}}
			if n > 2 {
				ranges = append(ranges, RowGroupRange{First: 1, N: n - 2})
			}
			for _, r := range ranges {
				out := filepath.Join(dir, "slice.parquet")
				os.Remove(out)
				start, rows := spliceSlice(t, in, out, r, schema, false)
				b := mustRead(t, out)
				ranged := filepath.Join(dir, "ranged.parquet")
				os.Remove(ranged)
				spliceSlice(t, in, ranged, r, schema, true)
				if !bytes.Equal(mustRead(t, ranged), b) {
					t.Fatalf("%v: PlanSpliceRange and PlanSplice then Slice splice different bytes", r)
				}
				m := readFooter(t, b)
				if m.NumRows != rows || len(m.RowGroups) != r.N {
					t.Fatalf("%v: footer has %d rows in %d row groups, want %d in %d", r, m.NumRows, len(m.RowGroups), rows, r.N)
				}
				for k, rg := range m.RowGroups {
					w := wm.RowGroups[r.First+k]
					if rg.NumRows != w.NumRows || int(rg.Ordinal) != k || len(rg.Columns) != len(w.Columns) {
						t.Fatalf("%v row group %d: %d rows, ordinal %d, %d columns; want %d, %d, %d",
							r, k, rg.NumRows, rg.Ordinal, len(rg.Columns), w.NumRows, k, len(w.Columns))
					}
					// The input's chunks; the appended ones' pages follow the
					// batches they were written in, which here cross row
					// groups (their values are compared below).
					for j := range len(rg.Columns) - len(schema.Fields()) {
						if !bytes.Equal(chunkBytes(b, &rg.Columns[j]), chunkBytes(wholeBytes, &w.Columns[j])) {
							t.Fatalf("%v row group %d column %d: bytes differ from the whole file's splice", r, k, j)
						}
					}
				}
				tslice := readTable(t, out)
				for c := 0; c < int(twhole.NumCols()); c++ {
					want := array.NewChunkedSlice(twhole.Column(c).Data(), start, start+rows)
					if !sameValues(t, tslice.Column(c).Data(), want) {
						t.Fatalf("%v: column %q differs from rows %d-%d of the whole file", r, twhole.Schema().Field(c).Name, start, start+rows-1)
					}
					want.Release()
				}
				tslice.Release()
				if got := int64(len(parquetGoRows(t, out))); got != rows {
					t.Fatalf("%v: parquet-go reads %d rows, want %d", r, got, rows)
				}
				checkSourceRange(t, in, r, start, rows)
			}
		})
	}
}

// checkSourceRange reads the row groups r of in with a Source and checks
// the rows and their locations.
func checkSourceRange(t *testing.T, in string, r RowGroupRange, start, rows int64) {
	t.Helper()
	ctx := context.Background()
	src, err := Open(ctx, Input{Path: in, Format: FormatParquet}, SourceOptions{RowGroups: r, BatchRows: 100})
	if err != nil {
		t.Fatal(err)
	}
	defer src.Close()
	var got int64
	for src.Next(ctx) {
		loc := src.Location()
		if loc.Row != start+got || loc.RowGroup < r.First || loc.RowGroup >= r.First+r.N {
			t.Fatalf("%v: batch at row %d of row group %d, want row %d within the range", r, loc.Row, loc.RowGroup, start+got)
		}
		got += src.RecordBatch().NumRows()
	}
	if err := src.Err(); err != nil {
		t.Fatal(err)
	}
	if got != rows {
		t.Fatalf("%v: source read %d rows, want %d", r, got, rows)
	}
}

// TestRowGroupRangeRefused: a range past the file's row groups, or on a
// format without row groups, is an error naming the file; so is slicing a
// plan past its row groups.
func TestRowGroupRangeRefused(t *testing.T) {
	dir := t.TempDir()
	in := filepath.Join(dir, "in.parquet")
	writeWithPqarrow(t, in, sinkSchema, testBatch, 300, nil...)
	ctx := context.Background()
	for _, r := range []RowGroupRange{{First: 1, N: 1}, {First: -1, N: 1}, {First: 0, N: 2}} {
		if src, err := Open(ctx, Input{Path: in, Format: FormatParquet}, SourceOptions{RowGroups: r}); err == nil {
			src.Close()
			t.Fatalf("%v of a one-row-group file opened", r)
		} else if !bytes.Contains([]byte(err.Error()), []byte(in)) {
			t.Fatalf("error %q does not name the file", err)
		}
		plan, err := PlanSplice(in)
		if err != nil {
			t.Fatal(err)
		}
		if _, err := plan.Slice(r); err == nil {
			t.Fatalf("plan sliced to %v", r)
		}
		if _, err := PlanSpliceRange(in, r); err == nil {
			t.Fatalf("plan of %v made", r)
		}
	}
	csv := filepath.Join(dir, "in.csv")
	if err := os.WriteFile(csv, []byte("a\n1\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	if src, err := Open(ctx, Input{Path: csv}, SourceOptions{RowGroups: RowGroupRange{First: 0, N: 1}}); err == nil {
		src.Close()
		t.Fatal("a row-group range of a CSV file opened")
	}
}
