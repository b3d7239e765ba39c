package pipeline

import (
	"context"
	"errors"
	"os"
	"path/filepath"
	"testing"

	"github.com/apache/arrow-go/v18/arrow/memory"
)

func TestOutDirSuccessLast(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "scored")
	os.MkdirAll(dir, 0o755)
	stale := filepath.Join(dir, SuccessMarker)
	if err := os.WriteFile(stale, nil, 0o644); err != nil {
		t.Fatal(err)
	}
	d, err := NewOutDir(dir)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := os.Stat(stale); !errors.Is(err, os.ErrNotExist) {
		t.Fatal("stale _SUCCESS survived before the first file")
	}
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	for _, rel := range []string{"date=2024-01-01/part-0.parquet", "date=2024-01-02/part-0.csv"} {
		p := d.Path(rel, ".parquet")
		s, err := NewParquetSink(p, sinkSchema, ParquetSinkOptions{Alloc: mem})
		if err != nil {
			t.Fatal(err)
		}
		rec := testBatch(mem, 0, 10)
		err = s.Write(context.Background(), rec)
		rec.Release()
		if err != nil {
			t.Fatal(err)
		}
		if _, err := os.Stat(stale); err == nil {
			t.Fatal("_SUCCESS present while files are still being written")
		}
		if err := s.Close(); err != nil {
			t.Fatal(err)
		}
	}
	if err := d.Success(); err != nil {
		t.Fatal(err)
	}
	for _, p := range []string{"date=2024-01-01/part-0.parquet", "date=2024-01-02/part-0.parquet", SuccessMarker} {
		if _, err := os.Stat(filepath.Join(dir, p)); err != nil {
			t.Errorf("missing %s: %v", p, err)
		}
	}
	mem.AssertSize(t, 0)
}

func TestOutDirPath(t *testing.T) {
	d, err := NewOutDir(t.TempDir())
	if err != nil {
		t.Fatal(err)
	}
	for _, tc := range []struct{ rel, ext, want string }{
		{"a.csv", ".parquet", "a.parquet"},
		{"p=1/b.arrow", ".parquet", "p=1/b.parquet"},
		{"../../escape.parquet", ".arrow", "escape.arrow"},
		{"noext", ".parquet", "noext.parquet"},
	} {
		if got := d.Path(tc.rel, tc.ext); got != filepath.Join(d.Dir(), tc.want) {
			t.Errorf("Path(%q, %q) = %q, want %q", tc.rel, tc.ext, got, tc.want)
		}
	}
}
