package main

import (
	"bytes"
	"context"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/ipc"
	"github.com/apache/arrow-go/v18/arrow/memory"
)

// A wide (more than 16 columns) Arrow stream on stdin scored to a file: the
// input is read once (a file is reopened to size its batches by width; a
// stream cannot be).
func TestScoreWideStdinToFile(t *testing.T) {
	dir, model, paths := demoData(t, 5000, 1)
	tbl := readParquet(t, paths[0])
	defer tbl.Release()
	fields := append([]arrow.Field(nil), tbl.Schema().Fields()...)
	var cols []arrow.Array
	for i := 0; i < int(tbl.NumCols()); i++ {
		c, err := array.Concatenate(tbl.Column(i).Data().Chunks(), memory.DefaultAllocator)
		if err != nil {
			t.Fatal(err)
		}
		cols = append(cols, c)
	}
	for j := 0; j < 10; j++ {
		b := array.NewFloat64Builder(memory.DefaultAllocator)
		for k := 0; k < int(tbl.NumRows()); k++ {
			b.Append(float64(k + j))
		}
		fields = append(fields, arrow.Field{Name: fmt.Sprintf("extra%d", j), Type: arrow.PrimitiveTypes.Float64})
		cols = append(cols, b.NewArray())
	}
	rec := array.NewRecordBatch(arrow.NewSchema(fields, nil), cols, tbl.NumRows())
	var buf bytes.Buffer
	w := ipc.NewWriter(&buf, ipc.WithSchema(rec.Schema()))
	if err := w.Write(rec); err != nil {
		t.Fatal(err)
	}
	w.Close()
	for _, out := range []string{filepath.Join(dir, "o.parquet"), filepath.Join(dir, "od") + "/"} {
		var so, se bytes.Buffer
		code := run(context.Background(), []string{"score", "-q", "--model", model, "-o", out, "-"}, bytes.NewReader(buf.Bytes()), &so, &se)
		if code != 0 {
			t.Errorf("-o %s from a %d-column stdin stream: exit %d: %s", out, len(fields), code, se.String())
		}
	}
}

// --report-only on an Arrow file and a Parquet file with the same columns:
// string covariates are read as dictionaries only when every input is
// Parquet, so the two inputs keep one schema.
func TestScoreReportOnlyMixedFormats(t *testing.T) {
	dir, model, paths := demoData(t, 5000, 2)
	a, p := filepath.Join(dir, "a.arrow"), filepath.Join(dir, "b.parquet")
	mustHeft(t, "score", "-q", "--model", model, "-o", a, paths[0])
	mustHeft(t, "score", "-q", "--model", model, "-o", p, paths[1])
	ren := []string{"--propensity-column", "p2", "--weight-column", "w2", "--in-support-column", "s2"}
	mustHeft(t, append([]string{"score", "-q", "--model", model, "-o", "-", a, p}, ren...)...)
	r := heft(t, append([]string{"score", "-q", "--model", model, "--report-only", a, p}, ren...)...)
	if r.code != 0 {
		t.Fatalf("--report-only on Arrow + Parquet: exit %d: %s", r.code, r.stderr)
	}
}

// A --by column the input lacks is the same usage error whichever way the
// table is read.
func TestScoreByTypoSameExitCode(t *testing.T) {
	dir, model, paths := demoData(t, 3000, 1)
	s := heft(t, "score", "-q", "--model", model, "--by", "nope", "-o", filepath.Join(dir, "s.parquet"), paths[0])
	r := heft(t, "score", "-q", "--model", model, "--by", "nope", "--reencode", "-o", filepath.Join(dir, "r.parquet"), paths[0])
	o := heft(t, "score", "-q", "--model", model, "--by", "nope", "--report-only", paths[0])
	if s.code != r.code || o.code != r.code {
		t.Errorf("--by nope: exit %d spliced, %d report-only, %d re-encoded\n%s%s%s", s.code, o.code, r.code, s.stderr, o.stderr, r.stderr)
	}
}

// --compression names are case-insensitive, as the sink takes them, so the
// input's codec in capitals still splices.
func TestScoreCompressionSpelling(t *testing.T) {
	dir, model, paths := demoData(t, 3000, 1)
	r := mustHeft(t, "score", "--model", model, "--compression", "SNAPPY", "-o", filepath.Join(dir, "s.parquet"), paths[0])
	if strings.Contains(r.stderr, "re-encoding") {
		t.Errorf("--compression SNAPPY on a snappy input re-encoded:\n%s", r.stderr)
	}
}

// Splicing and --report-only read only the model's columns, like any
// columnar reader: a damaged page in another column is copied as it is
// (the output's chunk is the input's bytes), while --reencode decodes every
// column and stops with exit 3 naming it. DEVELOPERS.md says so.
func TestScoreDamageOutsideModelColumns(t *testing.T) {
	dir, model, paths := demoData(t, 20000, 1)
	b, err := os.ReadFile(paths[0])
	if err != nil {
		t.Fatal(err)
	}
	pf := readParquetMeta(t, paths[0])
	cc, _ := pf.MetaData().RowGroup(0).ColumnChunk(0) // household_id, not a model column
	off := cc.DataPageOffset() + cc.TotalCompressedSize()/2
	for i := int64(0); i < 16; i++ {
		b[off+i] ^= 0xff
	}
	bad := filepath.Join(dir, "bad.parquet")
	if err := os.WriteFile(bad, b, 0o644); err != nil {
		t.Fatal(err)
	}
	out := filepath.Join(dir, "s.parquet")
	mustHeft(t, "score", "-q", "--model", model, "-o", out, bad)
	mustHeft(t, "score", "-q", "--model", model, "--report-only", bad)
	got, err := os.ReadFile(out)
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Contains(got, b[off-64:off+80]) {
		t.Fatal("the damaged chunk is not in the output as it was in the input")
	}
	r := heft(t, "score", "-q", "--model", model, "--reencode", "-o", filepath.Join(dir, "r.parquet"), bad)
	if r.code != 3 || !strings.Contains(r.stderr, `column "household_id"`) {
		t.Fatalf("--reencode of the damaged file: exit %d, %q; want 3 naming household_id", r.code, r.stderr)
	}
}
