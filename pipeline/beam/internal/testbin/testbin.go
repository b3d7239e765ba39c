// Package testbin builds the binaries the Beam module's tests run: heft
// from the core module beside this one, and heft-beam itself.
package testbin

import (
	"context"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"strings"
	"sync"
	"testing"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"

	"github.com/heft-project/heft/cmd/heft/scenario"
	"github.com/heft-project/heft/pipeline"
)

var (
	mu    sync.Mutex
	built = map[string]string{}
	dir   string
)

// moduleRoot is this module's directory.
func moduleRoot() string {
	_, file, _, _ := runtime.Caller(0)
	return filepath.Join(filepath.Dir(file), "..", "..")
}

// build runs go build in the module at modDir for pkg, once per test
// binary.
func build(t testing.TB, modDir, pkg, name string) string {
	t.Helper()
	mu.Lock()
	defer mu.Unlock()
	if p, ok := built[name]; ok {
		return p
	}
	if dir == "" {
		d, err := os.MkdirTemp("", "heft-testbin-")
		if err != nil {
			t.Fatal(err)
		}
		dir = d
	}
	out := filepath.Join(dir, name)
	cmd := exec.Command("go", "-C", modDir, "build", "-o", out, pkg)
	if b, err := cmd.CombinedOutput(); err != nil {
		t.Fatalf("go build %s: %v\n%s", pkg, err, b)
	}
	built[name] = out
	return out
}

// Heft returns the path of a heft binary built from the core module.
func Heft(t testing.TB) string {
	return build(t, filepath.Join(moduleRoot(), "..", ".."), "./cmd/heft", "heft")
}

// HeftBeam returns the path of a heft-beam binary built from this module.
func HeftBeam(t testing.TB) string {
	return build(t, moduleRoot(), "./cmd/heft-beam", "heft-beam")
}

// Run runs heft -q with args and fails the test when it fails.
func Run(t testing.TB, args ...string) {
	t.Helper()
	cmd := exec.Command(Heft(t), append([]string{"-q"}, args...)...)
	if out, err := cmd.CombinedOutput(); err != nil {
		t.Fatalf("heft %s: %v\n%s", strings.Join(args, " "), err, out)
	}
}

// Table writes a partitioned demo table (invented data, cmd/heft/scenario):
// three files of 10,000 rows under year=2026 and one of 50,000 rows in 20
// row groups under year=2027, and a model fitted on it by heft fit.
func Table(t testing.TB) (data, model string) {
	t.Helper()
	dir := t.TempDir()
	data = filepath.Join(dir, "data")
	ctx := context.Background()
	if _, _, err := scenario.Write(ctx, filepath.Join(data, "year=2026"), scenario.Options{Rows: 30000, Files: 3, RowGroupRows: 4000, Seed: 7}); err != nil {
		t.Fatal(err)
	}
	if _, _, err := scenario.Write(ctx, filepath.Join(data, "year=2027"), scenario.Options{Rows: 50000, RowGroupRows: 2500, Seed: 8}); err != nil {
		t.Fatal(err)
	}
	model = filepath.Join(dir, "model.json")
	Run(t, "fit", "-o", model, "--treatment", scenario.ColTreatment, "--covariates", strings.Join(scenario.Covariates, ","),
		"--outcome", scenario.ColOutcome, data)
	return data, model
}

// Spoil rewrites the Parquet file path with treatment value 2 at file row
// bad, in row groups of 2,500 rows: the kind of value a worker finds only
// when it reads that part.
func Spoil(t testing.TB, path string, bad int64) {
	t.Helper()
	ctx := context.Background()
	src, err := pipeline.Open(ctx, pipeline.Input{Path: path, Format: pipeline.FormatParquet}, pipeline.SourceOptions{})
	if err != nil {
		t.Fatal(err)
	}
	defer src.Close()
	tmp := path + ".new.parquet"
	sink, err := pipeline.NewParquetSink(tmp, src.Schema(), pipeline.ParquetSinkOptions{RowGroupRows: 2500})
	if err != nil {
		t.Fatal(err)
	}
	ti := src.Schema().FieldIndices(scenario.ColTreatment)[0]
	var row int64
	for src.Next(ctx) {
		rec := src.RecordBatch()
		cols := append([]arrow.Array(nil), rec.Columns()...)
		if n := rec.NumRows(); bad >= row && bad < row+n {
			b := array.NewInt8Builder(memory.DefaultAllocator)
			for i, v := range cols[ti].(*array.Int8).Int8Values() {
				if int64(i) == bad-row {
					v = 2
				}
				b.Append(v)
			}
			cols[ti] = b.NewArray()
			b.Release()
			defer cols[ti].Release()
		}
		out := array.NewRecordBatch(rec.Schema(), cols, rec.NumRows())
		err := sink.Write(ctx, out)
		out.Release()
		if err != nil {
			t.Fatal(err)
		}
		row += rec.NumRows()
	}
	if err := src.Err(); err != nil {
		t.Fatal(err)
	}
	if err := sink.Close(); err != nil {
		t.Fatal(err)
	}
	if err := os.Rename(tmp, path); err != nil {
		t.Fatal(err)
	}
}
