package stage

import (
	"context"
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/heft-project/heft/cmd/heft/scenario"
	"github.com/heft-project/heft/pipeline"
	"github.com/heft-project/heft/pipeline/beam/internal/testbin"
	"github.com/heft-project/heft/score/job"
)

// TestFailingPartFailsTheJob: a bad value in one part of the large file
// makes that bundle fail; the job fails with heft's message (file, row
// group, row, column, what is wrong), no success marker is written (a stale
// one is removed at launch), and nothing half-written is left: the part's
// output never appears and no temporary file remains.
func TestFailingPartFailsTheJob(t *testing.T) {
	data, model := table(t)
	large := filepath.Join(data, "year=2027", "demo.parquet")
	testbin.Spoil(t, large, 31234) // row group 12 of 20
	out := filepath.Join(t.TempDir(), "out")
	if err := os.MkdirAll(out, 0o755); err != nil {
		t.Fatal(err)
	}
	marker := filepath.Join(out, pipeline.SuccessMarker)
	if err := os.WriteFile(marker, nil, 0o644); err != nil {
		t.Fatal(err)
	}
	cfg := config(model, out, data)
	cfg.PartRows = 10000
	cfg.ReportPath = filepath.Join(t.TempDir(), "report.json")
	j, err := runJob(t, cfg)
	if err == nil {
		t.Fatal("the job succeeded")
	}
	for _, want := range []string{large, "row group 12", "row 31234", scenario.ColTreatment, "treatment value \"2\""} {
		if !strings.Contains(err.Error(), want) {
			t.Errorf("the job's error does not name %q:\n%v", want, err)
		}
	}
	if _, err := os.Stat(marker); !errors.Is(err, os.ErrNotExist) {
		t.Fatalf("success marker after a failed job: %v", err)
	}
	if _, err := os.Stat(cfg.ReportPath); !errors.Is(err, os.ErrNotExist) {
		t.Fatalf("report after a failed job: %v", err)
	}
	for _, p := range j.Parts() {
		if p.Path == large && p.First <= 12 && 12 < p.First+p.N {
			if _, err := os.Stat(p.Target); !errors.Is(err, os.ErrNotExist) {
				t.Fatalf("the failed part's output %s exists", p.Target)
			}
		}
	}
	// Bundles of other parts may still be writing when the runner reports
	// the failure (in this process, with Prism); their temporary files go
	// when they finish or fail, and a killed worker's are swept by the next
	// launch (pipeline.NewOutDir).
	deadline := time.Now().Add(10 * time.Second)
	for {
		var left []string
		filepath.WalkDir(out, func(p string, d os.DirEntry, err error) error {
			if err == nil && strings.Contains(d.Name(), "heft-tmp") {
				left = append(left, p)
			}
			return err
		})
		if len(left) == 0 {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("temporary files left: %v", left)
		}
		time.Sleep(50 * time.Millisecond)
	}
}

// TestPlanRefuses: what the launcher refuses before any worker starts,
// with heft score's kinds of error.
func TestPlanRefuses(t *testing.T) {
	data, model := table(t)
	ctx := context.Background()
	for _, tc := range []struct {
		name string
		edit func(c *Config)
		kind job.Kind
		want string
	}{
		{"no output", func(c *Config) { c.Out = "" }, job.KindUsage, "-o OUTDIR is required"},
		{"gate without report", func(c *Config) { c.Gate.MaxSMD = 0.1 }, job.KindUsage, "need --report or --state"},
		{"by a column the table lacks", func(c *Config) { c.By = []string{"regionn"}; c.ReportPath = c.Out + ".json" }, job.KindUsage, "regionn"},
		{"bad estimand", func(c *Config) { c.Policy.Estimand = "ate2" }, job.KindUsage, "ate2"},
		{"model missing", func(c *Config) { c.ModelPath += ".gone" }, job.KindModel, ".gone"},
		{"output is the input directory", func(c *Config) { c.Out = data }, job.KindUsage, "refusing to overwrite"},
		{"report is an input", func(c *Config) { c.ReportPath = filepath.Join(data, "year=2026", "part-00000.parquet") }, job.KindUsage, "one of the inputs"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			cfg := config(model, filepath.Join(t.TempDir(), "out"), data)
			tc.edit(&cfg)
			_, err := Plan(ctx, cfg)
			var je *job.Error
			if !errors.As(err, &je) || je.Kind != tc.kind || !strings.Contains(err.Error(), tc.want) {
				t.Fatalf("error %v (%T), want kind %d naming %q", err, err, tc.kind, tc.want)
			}
		})
	}

	// A data file in the output directory that this job would not write
	// (a run with another --part-rows, say) would be read as part of the
	// table: refused. The job's own names are not.
	out := filepath.Join(t.TempDir(), "out")
	cfg := config(model, out, data)
	cfg.PartRows = 10000
	j, err := Plan(ctx, cfg)
	if err != nil {
		t.Fatal(err)
	}
	for _, p := range j.Parts() {
		os.MkdirAll(filepath.Dir(p.Target), 0o755)
		if err := os.WriteFile(p.Target, []byte("old"), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	if _, err := Plan(ctx, cfg); err != nil {
		t.Fatalf("a rerun over the job's own files: %v", err)
	}
	cfg.PartRows = 20000
	_, err = Plan(ctx, cfg)
	if err == nil || !strings.Contains(err.Error(), "does not write") {
		t.Fatalf("stale parts accepted: %v", err)
	}
	// The same through a link to the directory, named without a slash.
	link := filepath.Join(t.TempDir(), "link")
	if err := os.Symlink(out, link); err != nil {
		t.Fatal(err)
	}
	cfg.Out = link
	if _, err = Plan(ctx, cfg); err == nil || !strings.Contains(err.Error(), "does not write") {
		t.Fatalf("stale parts behind a link accepted: %v", err)
	}
}
