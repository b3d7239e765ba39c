package stage

import (
	"context"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"
	"github.com/apache/arrow-go/v18/parquet/file"
	"github.com/apache/arrow-go/v18/parquet/pqarrow"
	"github.com/apache/beam/sdks/v2/go/pkg/beam"
	"github.com/apache/beam/sdks/v2/go/pkg/beam/testing/ptest"

	"github.com/heft-project/heft/aggregate"
	"github.com/heft-project/heft/pipeline"
	"github.com/heft-project/heft/pipeline/beam/internal/testbin"
	"github.com/heft-project/heft/score"
	"github.com/heft-project/heft/score/job"
)

// The tests run their jobs on Beam's Prism runner, in this process.
func TestMain(m *testing.M) { ptest.Main(m) }

// tol is the relative tolerance between the job's figures and heft
// score's: the parts' states are merged in the order the runner chooses,
// and compensated sums agree to about 1e-16 whatever the order.
const tol = 1e-12

// heft runs the heft command built from the core module.
var heft = testbin.Run

// table is the partitioned demo table of testbin.Table and its model.
var table = testbin.Table

// config is the job heft score's flags would describe.
func config(model, out string, inputs ...string) Config {
	return Config{
		Settings: Settings{ModelPath: model, Columns: score.DefaultColumns(), Policy: score.Policy{Estimand: score.ATE},
			Unseen: "error", Compression: "snappy", RowGroupRows: 131072, BatchRows: 65536, Workers: 1,
			MinSegmentRows: 100, MaxSegments: 1000, Version: job.Version},
		Inputs: inputs, Out: out,
	}
}

// runJob plans cfg and runs it on Prism.
func runJob(t *testing.T, cfg Config) (*Job, error) {
	t.Helper()
	j, err := Plan(context.Background(), cfg)
	if err != nil {
		t.Fatal(err)
	}
	p, s := beam.NewPipelineWithRoot()
	j.Build(s)
	return j, ptest.Run(p)
}

// TestJobEqualsHeftScore: on a partitioned table whose large file is split
// into ranges of row groups, the job's output files, read in name order,
// hold heft score's table row for row (values to 1e-12, the appended
// columns' metadata equal), and its report and state equal heft score's to
// relative 1e-12; the success marker is written.
func TestJobEqualsHeftScore(t *testing.T) {
	data, model := table(t)
	// One file as Arrow IPC: a part that is a whole non-Parquet file.
	toArrow(t, filepath.Join(data, "year=2026", "part-00002.parquet"))
	dir := t.TempDir()
	cli := filepath.Join(dir, "cli") + "/"
	heft(t, "score", "-m", model, "-o", cli, "--report", filepath.Join(dir, "cli.json"),
		"--state", filepath.Join(dir, "cli-state.json"), "--by", "district", "--truncate-quantile", "0.99", data)

	for _, tc := range []struct {
		name     string
		partRows int64
		reencode bool
	}{{"spliced", 12000, false}, {"reencoded", 20000, true}} {
		t.Run(tc.name, func(t *testing.T) {
			out := filepath.Join(dir, tc.name)
			cfg := config(model, out, data)
			cfg.PartRows, cfg.Reencode = tc.partRows, tc.reencode
			cfg.By, cfg.Policy.TruncateQ = []string{"district"}, 0.99
			cfg.ReportPath, cfg.StatePath = filepath.Join(dir, tc.name+".json"), filepath.Join(dir, tc.name+"-state.json")
			j, err := runJob(t, cfg)
			if err != nil {
				t.Fatal(err)
			}
			split := 0
			for _, p := range j.Parts() {
				if p.N > 0 {
					split++
				}
			}
			arrowParts := 0
			for _, p := range j.Parts() {
				if pipeline.Format(p.Format) == pipeline.FormatArrowFile {
					arrowParts++
				}
			}
			if arrowParts != 1 {
				t.Fatalf("%d Arrow parts, want 1", arrowParts)
			}
			if len(j.Parts()) < 6 || split < 3 {
				t.Fatalf("%d parts, %d of them ranges of row groups: the large file was not split", len(j.Parts()), split)
			}
			if _, err := os.Stat(filepath.Join(out, pipeline.SuccessMarker)); err != nil {
				t.Fatalf("no success marker: %v", err)
			}
			sameTables(t, cli, out)
			want := readJSON(t, filepath.Join(dir, "cli.json"))
			sameJSON(t, "report", want, readJSON(t, cfg.ReportPath))
			st, err := aggregate.ReadState(cfg.StatePath)
			if err != nil {
				t.Fatal(err)
			}
			b, _ := json.Marshal(st.Report())
			var fromState any
			json.Unmarshal(b, &fromState)
			sameJSON(t, "the state's report", want, fromState)
		})
	}
}

// toArrow replaces the Parquet file path with an Arrow IPC file of the
// same rows (path with the extension .arrow).
func toArrow(t *testing.T, path string) {
	t.Helper()
	ctx := context.Background()
	src, err := pipeline.Open(ctx, pipeline.Input{Path: path, Format: pipeline.FormatParquet}, pipeline.SourceOptions{})
	if err != nil {
		t.Fatal(err)
	}
	sink, err := pipeline.NewArrowFileSink(strings.TrimSuffix(path, ".parquet")+".arrow", src.Schema(), pipeline.ArrowSinkOptions{})
	if err != nil {
		t.Fatal(err)
	}
	for src.Next(ctx) {
		if err := sink.Write(ctx, src.RecordBatch()); err != nil {
			t.Fatal(err)
		}
	}
	if err := src.Err(); err != nil {
		t.Fatal(err)
	}
	src.Close()
	if err := sink.Close(); err != nil {
		t.Fatal(err)
	}
	if err := os.Remove(path); err != nil {
		t.Fatal(err)
	}
}

// sameTables compares every file heft score wrote under cli with the job's
// files for the same input under out: the whole file's name, or its parts'
// names in order.
func sameTables(t *testing.T, cli, out string) {
	t.Helper()
	var n int
	filepath.WalkDir(cli, func(p string, d os.DirEntry, err error) error {
		if err != nil || d.IsDir() || !strings.HasSuffix(p, ".parquet") {
			return err
		}
		n++
		rel, _ := filepath.Rel(cli, p)
		stem := strings.TrimSuffix(filepath.Join(out, rel), ".parquet")
		parts, _ := filepath.Glob(stem + "-rg*.parquet")
		if _, err := os.Stat(stem + ".parquet"); err == nil {
			parts = append(parts, stem+".parquet")
		}
		if len(parts) == 0 {
			t.Fatalf("no output for %s", rel)
		}
		slices.Sort(parts)
		want := readTable(t, p)
		defer want.Release()
		var got []arrow.Table
		for _, q := range parts {
			got = append(got, readTable(t, q))
			if !got[0].Schema().Equal(got[len(got)-1].Schema()) || !want.Schema().Equal(got[0].Schema()) {
				t.Fatalf("%s: schema\n%v\nwant\n%v", q, got[len(got)-1].Schema(), want.Schema())
			}
			if wm, gm := want.Schema().Metadata(), got[len(got)-1].Schema().Metadata(); !wm.Equal(gm) {
				t.Fatalf("%s: metadata %v, want %v", q, gm, wm)
			}
		}
		sameRows(t, rel, want, got)
		for _, g := range got {
			g.Release()
		}
		return nil
	})
	if n == 0 {
		t.Fatal("heft score wrote no files")
	}
}

func readTable(t *testing.T, path string) arrow.Table {
	t.Helper()
	pf, err := file.OpenParquetFile(path, false)
	if err != nil {
		t.Fatal(err)
	}
	defer pf.Close()
	fr, err := pqarrow.NewFileReader(pf, pqarrow.ArrowReadProperties{BatchSize: 1 << 16}, memory.DefaultAllocator)
	if err != nil {
		t.Fatal(err)
	}
	tbl, err := fr.ReadTable(context.Background())
	if err != nil {
		t.Fatalf("%s: %v", path, err)
	}
	return tbl
}

// sameRows compares want with the concatenation of got, column by column:
// float64 values to relative tol, everything else exactly.
func sameRows(t *testing.T, name string, want arrow.Table, got []arrow.Table) {
	t.Helper()
	var rows int64
	for _, g := range got {
		rows += g.NumRows()
	}
	if rows != want.NumRows() {
		t.Fatalf("%s: %d rows, want %d", name, rows, want.NumRows())
	}
	for c := 0; c < int(want.NumCols()); c++ {
		w := flatten(t, want.Column(c).Data().Chunks())
		var chunks []arrow.Array
		for _, g := range got {
			chunks = append(chunks, g.Column(c).Data().Chunks()...)
		}
		g := flatten(t, chunks)
		col := want.Schema().Field(c).Name
		if wf, ok := w.(*array.Float64); ok {
			gf := g.(*array.Float64)
			for i := range wf.Len() {
				a, b := wf.Value(i), gf.Value(i)
				if wf.IsNull(i) != gf.IsNull(i) || !wf.IsNull(i) && math.Abs(a-b) > tol*math.Max(1, math.Abs(a)) {
					t.Fatalf("%s row %d column %s: %v, want %v", name, i, col, b, a)
				}
			}
		} else if !array.Equal(w, g) {
			t.Fatalf("%s column %s differs", name, col)
		}
		w.Release()
		g.Release()
	}
}

func flatten(t *testing.T, chunks []arrow.Array) arrow.Array {
	t.Helper()
	a, err := array.Concatenate(chunks, memory.DefaultAllocator)
	if err != nil {
		t.Fatal(err)
	}
	return a
}

func readJSON(t *testing.T, path string) any {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	var v any
	if err := json.Unmarshal(b, &v); err != nil {
		t.Fatalf("%s: %v", path, err)
	}
	return v
}

// zero is the absolute floor of sameJSON: a figure that is zero up to
// rounding (the drift of a covariate whose means agree, 3e-16 in one order
// of merging and 0 in another) has no relative precision.
const zero = 1e-14

// sameJSON compares two reports: numbers to relative tol (or within zero),
// everything else exactly, but for the run time.
func sameJSON(t *testing.T, what string, want, got any) {
	t.Helper()
	var walk func(path string, a, b any)
	walk = func(path string, a, b any) {
		switch x := a.(type) {
		case map[string]any:
			y, ok := b.(map[string]any)
			if !ok || len(x) != len(y) {
				t.Fatalf("%s %s: %v, want %v", what, path, b, a)
			}
			for k, v := range x {
				if k == "run_seconds" {
					continue
				}
				walk(path+"."+k, v, y[k])
			}
		case []any:
			y, ok := b.([]any)
			if !ok || len(x) != len(y) {
				t.Fatalf("%s %s: %d elements, want %d", what, path, len(y), len(x))
			}
			for i := range x {
				walk(fmt.Sprintf("%s[%d]", path, i), x[i], y[i])
			}
		case float64:
			y, ok := b.(float64)
			if d := math.Abs(x - y); !ok || d > tol*math.Max(math.Abs(x), math.Abs(y)) && d > zero {
				t.Fatalf("%s %s: %v, want %v", what, path, b, a)
			}
		default:
			if a != b {
				t.Fatalf("%s %s: %v, want %v", what, path, b, a)
			}
		}
	}
	walk("", want, got)
}
