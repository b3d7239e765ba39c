package pipeline

import (
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"syscall"
	"testing"
)

// Output files get 0666 less the umask, as os.Create gives (os.CreateTemp
// alone would leave them 0600, unreadable to the rest of a team).
func TestAtomicModeFollowsUmask(t *testing.T) {
	old := syscall.Umask(0o027)
	defer syscall.Umask(old)
	target := filepath.Join(t.TempDir(), "out.json")
	if err := WriteFileAtomic(target, []byte("{}")); err != nil {
		t.Fatal(err)
	}
	st, err := os.Stat(target)
	if err != nil {
		t.Fatal(err)
	}
	if got := st.Mode().Perm(); got != 0o640 {
		t.Errorf("mode %v, want 0640 (0666 &^ umask 027)", got)
	}
}

// A killed run's temporary files (their process is gone) are removed when
// the target is written again; a live process's are left alone.
func TestAtomicRemovesStaleTemps(t *testing.T) {
	dir := t.TempDir()
	target := filepath.Join(dir, "part-0.parquet")
	// A process that has ended: its pid is free (or reused, which only
	// leaves the file in place).
	cmd := exec.Command("true")
	if err := cmd.Run(); err != nil {
		t.Skip("no child process:", err)
	}
	dead := cmd.Process.Pid
	stale := filepath.Join(dir, ".part-0.parquet.heft-tmp-"+strconv.Itoa(dead)+"-abc")
	live := filepath.Join(dir, ".part-0.parquet.heft-tmp-"+strconv.Itoa(os.Getppid())+"-def")
	other := filepath.Join(dir, ".part-1.parquet.heft-tmp-"+strconv.Itoa(dead)+"-ghi")
	legacy := filepath.Join(dir, ".part-0.parquet.heft-tmp-123abc")
	for _, p := range []string{stale, live, other, legacy} {
		if err := os.WriteFile(p, []byte("half"), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	if err := WriteFileAtomic(target, []byte("whole")); err != nil {
		t.Fatal(err)
	}
	for p, want := range map[string]bool{stale: false, live: true, other: true, legacy: true} {
		if _, err := os.Stat(p); (err == nil) != want {
			t.Errorf("%s: exists=%v, want %v", filepath.Base(p), err == nil, want)
		}
	}
	RemoveStaleTemps(dir, "")
	if _, err := os.Stat(other); err == nil {
		t.Error("a sweep of the directory kept a dead process's temporary file")
	}
	if _, err := os.Stat(live); err != nil {
		t.Error("a sweep removed a live process's temporary file")
	}
}
