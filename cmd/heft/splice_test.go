package main

import (
	"context"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"
	"github.com/apache/arrow-go/v18/parquet/file"
	"github.com/apache/arrow-go/v18/parquet/pqarrow"

	"github.com/heft-project/heft/cmd/heft/scenario"
)

// readParquet reads a whole (small) Parquet file with arrow-go.
func readParquet(t *testing.T, path string) arrow.Table {
	t.Helper()
	pf, err := file.OpenParquetFile(path, false)
	if err != nil {
		t.Fatalf("open %s: %v", path, err)
	}
	defer pf.Close()
	fr, err := pqarrow.NewFileReader(pf, pqarrow.ArrowReadProperties{BatchSize: 1 << 16}, memory.DefaultAllocator)
	if err != nil {
		t.Fatal(err)
	}
	tbl, err := fr.ReadTable(context.Background())
	if err != nil {
		t.Fatalf("read %s: %v", path, err)
	}
	return tbl
}

// sameTables requires a and b to have the same schema (names, types,
// nullability, key-value metadata) and the same values.
func sameTables(t *testing.T, what string, a, b arrow.Table) {
	t.Helper()
	if !a.Schema().Equal(b.Schema()) {
		t.Fatalf("%s: schemas differ:\n%v\n%v", what, a.Schema(), b.Schema())
	}
	if !a.Schema().Metadata().Equal(b.Schema().Metadata()) {
		t.Fatalf("%s: key-value metadata differs:\n%v\n%v", what, a.Schema().Metadata(), b.Schema().Metadata())
	}
	if a.NumRows() != b.NumRows() {
		t.Fatalf("%s: %d rows against %d", what, a.NumRows(), b.NumRows())
	}
	for i := 0; i < int(a.NumCols()); i++ {
		if !array.ChunkedEqual(a.Column(i).Data(), b.Column(i).Data()) {
			t.Fatalf("%s: column %q differs", what, a.Schema().Field(i).Name)
		}
	}
}

// The default Parquet-to-Parquet path copies the input's column chunks; its
// output must be the re-encoding path's, value for value, with the same
// report, and the input's row groups.
func TestScoreSpliceEqualsReencode(t *testing.T) {
	dir, model, paths := demoData(t, 20000, 1)
	spliced, re := filepath.Join(dir, "spliced.parquet"), filepath.Join(dir, "re.parquet")
	common := []string{"score", "--model", model, "--predictions", "--trim", "0.02", "--stabilize"}
	r := mustHeft(t, append(common, "-o", spliced, "--report", filepath.Join(dir, "rs.json"), paths[0])...)
	if strings.Contains(r.stderr, "re-encoding") {
		t.Fatalf("the demo table was not spliced:\n%s", r.stderr)
	}
	mustHeft(t, append(common, "-q", "--reencode", "--row-group-rows", "4096", "-o", re, "--report", filepath.Join(dir, "rr.json"), paths[0])...)
	a, b := readParquet(t, spliced), readParquet(t, re)
	defer a.Release()
	defer b.Release()
	sameTables(t, "spliced against re-encoded", a, b)
	compareNumbers(t, "estimates", readReport(t, filepath.Join(dir, "rs.json"))["estimates"], readReport(t, filepath.Join(dir, "rr.json"))["estimates"], 0)

	// --report-only reads only the model's columns; its report is the same.
	mustHeft(t, "score", "-q", "--model", model, "--predictions", "--trim", "0.02", "--stabilize", "--report-only", "--report", filepath.Join(dir, "ro.json"), paths[0])
	for _, sec := range []string{"estimates", "ess", "sum_weights", "balance", "overlap", "drift"} {
		compareNumbers(t, sec, readReport(t, filepath.Join(dir, "rs.json"))[sec], readReport(t, filepath.Join(dir, "ro.json"))[sec], 1e-12)
	}

	in, out := readParquetMeta(t, paths[0]), readParquetMeta(t, spliced)
	if in.NumRowGroups() != out.NumRowGroups() {
		t.Fatalf("spliced output has %d row groups, the input %d", out.NumRowGroups(), in.NumRowGroups())
	}
}

func readParquetMeta(t *testing.T, path string) *file.Reader {
	t.Helper()
	pf, err := file.OpenParquetFile(path, false)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { pf.Close() })
	return pf
}

// Options that need every column re-encoded fall back with a log line
// saying why, and still write the same table.
func TestScoreSpliceFallsBack(t *testing.T) {
	dir, model, paths := demoData(t, 9000, 1)
	ref := filepath.Join(dir, "ref.parquet")
	mustHeft(t, "score", "-q", "--model", model, "-o", ref, paths[0])
	want := readParquet(t, ref)
	defer want.Release()
	cases := []struct {
		name string
		args []string
		why  string // "" = spliced, no log line
	}{
		{"zstd", []string{"--compression", "zstd"}, "--compression asks for zstd"},
		{"row groups", []string{"--row-group-rows", "1000"}, "--row-group-rows"},
		{"same codec", []string{"--compression", "snappy"}, ""},
		{"forced", []string{"--reencode"}, ""},
	}
	for i, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			out := filepath.Join(dir, "out"+string(rune('a'+i))+".parquet")
			r := mustHeft(t, append(append([]string{"score", "--model", model, "-o", out}, c.args...), paths[0])...)
			told := strings.Contains(r.stderr, "re-encoding every column")
			if c.why == "" && told || c.why != "" && (!told || !strings.Contains(r.stderr, c.why)) {
				t.Fatalf("stderr %q, want the reason %q", r.stderr, c.why)
			}
			got := readParquet(t, out)
			defer got.Release()
			sameTables(t, c.name, want, got)
		})
	}
}

// A directory of hive partitions is spliced file by file, with segments by
// a partition key that exists only in the folder names.
func TestScoreSpliceDirectory(t *testing.T) {
	dir, model, _ := demoData(t, 12000, 1)
	src := filepath.Join(dir, "parts")
	for i, region := range []string{"north", "south"} {
		d := filepath.Join(src, "region="+region)
		if err := os.MkdirAll(d, 0o755); err != nil {
			t.Fatal(err)
		}
		_, _, err := scenario.Write(context.Background(), filepath.Join(d, "part"), scenario.Options{Rows: int64(3000 * (i + 1)), Seed: uint64(11 + i), RowGroupRows: 1024})
		if err != nil {
			t.Fatal(err)
		}
	}
	spliced, re := filepath.Join(dir, "spliced")+"/", filepath.Join(dir, "re")+"/"
	mustHeft(t, "score", "-q", "--model", model, "--by", "region", "--report", filepath.Join(dir, "rs.json"), "-o", spliced, src)
	mustHeft(t, "score", "-q", "--reencode", "--row-group-rows", "4096", "--model", model, "--by", "region", "--report", filepath.Join(dir, "rr.json"), "-o", re, src)
	for _, region := range []string{"north", "south"} {
		rel := filepath.Join("region="+region, "part", "demo.parquet")
		a, b := readParquet(t, filepath.Join(spliced, rel)), readParquet(t, filepath.Join(re, rel))
		sameTables(t, rel, a, b)
		a.Release()
		b.Release()
	}
	for _, m := range []string{filepath.Join(spliced, "_SUCCESS"), filepath.Join(re, "_SUCCESS")} {
		if _, err := os.Stat(m); err != nil {
			t.Fatal(err)
		}
	}
	compareNumbers(t, "segments", readReport(t, filepath.Join(dir, "rs.json"))["segments"], readReport(t, filepath.Join(dir, "rr.json"))["segments"], 0)
}

// Splicing changes how the table is read and written, never what is
// computed: for each estimand, policy and output option, the spliced output
// and report equal the re-encoding path's.
func TestScoreSpliceEqualsReencodeAcrossOptions(t *testing.T) {
	dir, model, paths := demoData(t, 12000, 1)
	cases := [][]string{
		{"--estimand", "att"},
		{"--estimand", "atc", "--clip", "0.01"},
		{"--estimand", "overlap", "--predictions"},
		{"--trim", "0.05", "--by", scenario.ColDistrict},
		{"--truncate-quantile", "0.99", "--stabilize", "--by", scenario.ColTariff},
		{"--unseen", "reference", "--propensity-column", "e", "--weight-column", "w", "--in-support-column", "s"},
	}
	for i, opts := range cases {
		t.Run(strings.Join(opts, " "), func(t *testing.T) {
			tag := string(rune('a' + i))
			sp, re := filepath.Join(dir, "s"+tag+".parquet"), filepath.Join(dir, "r"+tag+".parquet")
			rs, rr := filepath.Join(dir, "s"+tag+".json"), filepath.Join(dir, "r"+tag+".json")
			base := append([]string{"score", "-q", "--model", model}, opts...)
			mustHeft(t, append(base, "-o", sp, "--report", rs, paths[0])...)
			mustHeft(t, append(base, "--reencode", "--row-group-rows", "4096", "-o", re, "--report", rr, paths[0])...)
			a, b := readParquet(t, sp), readParquet(t, re)
			defer a.Release()
			defer b.Release()
			sameTables(t, "spliced against re-encoded", a, b)
			ra, rb := readReport(t, rs), readReport(t, rr)
			for _, sec := range []string{"estimates", "ess", "sum_weights", "balance", "overlap", "drift", "segments", "warnings"} {
				compareNumbers(t, sec, ra[sec], rb[sec], 0)
			}
		})
	}
}
