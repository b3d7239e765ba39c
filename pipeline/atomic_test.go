package pipeline

import (
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

func listDir(t *testing.T, dir string) []string {
	t.Helper()
	ents, err := os.ReadDir(dir)
	if err != nil {
		t.Fatal(err)
	}
	var names []string
	for _, e := range ents {
		names = append(names, e.Name())
	}
	return names
}

func TestAtomicCommitReplacesTarget(t *testing.T) {
	dir := t.TempDir()
	target := filepath.Join(dir, "out.parquet")
	if err := os.WriteFile(target, []byte("old"), 0o600); err != nil {
		t.Fatal(err)
	}
	af, err := CreateAtomic(target)
	if err != nil {
		t.Fatal(err)
	}
	tmp := filepath.Base(af.TempName())
	if !strings.HasPrefix(tmp, ".out.parquet.heft-tmp-") {
		t.Errorf("temporary name %q", tmp)
	}
	af.Write([]byte("new"))
	if b, _ := os.ReadFile(target); string(b) != "old" {
		t.Errorf("target changed before commit: %q", b)
	}
	if err := af.Commit(); err != nil {
		t.Fatal(err)
	}
	if b, _ := os.ReadFile(target); string(b) != "new" {
		t.Errorf("target %q after commit", b)
	}
	if st, _ := os.Stat(target); st.Mode().Perm() != 0o600 {
		t.Errorf("mode %v, want the old target's 0600", st.Mode().Perm())
	}
	if err := af.Abort(); err != nil {
		t.Errorf("abort after commit: %v", err)
	}
	if got := listDir(t, dir); len(got) != 1 {
		t.Errorf("directory holds %v", got)
	}
}

func TestAtomicAbortLeavesNothing(t *testing.T) {
	dir := t.TempDir()
	target := filepath.Join(dir, "out.arrow")
	af, err := CreateAtomic(target)
	if err != nil {
		t.Fatal(err)
	}
	af.Write([]byte("partial"))
	for range 2 { // idempotent
		if err := af.Abort(); err != nil {
			t.Fatal(err)
		}
	}
	if got := listDir(t, dir); len(got) != 0 {
		t.Errorf("directory holds %v after abort", got)
	}
}

type failWriter struct{}

var errDiskFull = errors.New("no space left on device")

func (failWriter) Write([]byte) (int, error) { return 0, errDiskFull }

func TestAtomicWriteFailure(t *testing.T) {
	dir := t.TempDir()
	target := filepath.Join(dir, "out.parquet")
	af, err := CreateAtomic(target)
	if err != nil {
		t.Fatal(err)
	}
	af.out = failWriter{} // the disk fills up under the buffer
	af.Write(make([]byte, 10))
	err = af.Commit()
	var pe *Error
	if !errors.Is(err, errDiskFull) || !errors.As(err, &pe) || pe.File != target {
		t.Fatalf("commit error %v, want a *Error naming %s wrapping the write error", err, target)
	}
	if got := listDir(t, dir); len(got) != 0 {
		t.Errorf("directory holds %v after a failed commit", got)
	}
}

func TestCreateAtomicBadTarget(t *testing.T) {
	dir := t.TempDir()
	if _, err := CreateAtomic(dir); err == nil {
		t.Error("a directory target was accepted")
	}
	if _, err := CreateAtomic(filepath.Join(dir, "missing", "x.parquet")); err == nil {
		t.Error("a target in a missing directory was accepted")
	}
}

func TestSameFile(t *testing.T) {
	dir := t.TempDir()
	a := filepath.Join(dir, "a")
	os.WriteFile(a, nil, 0o644)
	link := filepath.Join(dir, "l")
	if err := os.Symlink(a, link); err != nil {
		t.Skip(err)
	}
	if !SameFile(a, link) || !SameFile(a, filepath.Join(dir, ".", "a")) {
		t.Error("same file not recognised")
	}
	if SameFile(a, filepath.Join(dir, "b")) {
		t.Error("a missing file matched")
	}
}
