package main

import (
	"bytes"
	"context"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/apache/arrow-go/v18/parquet/file"

	"github.com/heft-project/heft/cmd/heft/scenario"
	"github.com/heft-project/heft/pipeline"
)

// child starts heft as a child process (TestMain runs main when
// HEFT_TEST_MAIN=1), with stderr captured.
func child(t *testing.T, args ...string) (*exec.Cmd, *bytes.Buffer) {
	t.Helper()
	cmd := exec.Command(os.Args[0], args...)
	cmd.Env = append(os.Environ(), "HEFT_TEST_MAIN=1")
	var stderr bytes.Buffer
	cmd.Stderr = &stderr
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	return cmd, &stderr
}

// dirFiles lists the files under dir by relative path, hidden ones apart.
func dirFiles(t *testing.T, dir string) (visible, hidden []string) {
	t.Helper()
	filepath.WalkDir(dir, func(p string, d os.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		rel, _ := filepath.Rel(dir, p)
		if strings.HasPrefix(d.Name(), ".") {
			hidden = append(hidden, rel)
		} else {
			visible = append(visible, rel)
		}
		return nil
	})
	slices.Sort(visible)
	return visible, hidden
}

// sameTree fails unless every visible file of got is byte-identical to the
// file of the same name in want; with all, got must also have every file.
func sameTree(t *testing.T, want, got string, all bool) {
	t.Helper()
	wf, _ := dirFiles(t, want)
	gf, _ := dirFiles(t, got)
	if all && !slices.Equal(wf, gf) {
		t.Fatalf("files %v, want %v", gf, wf)
	}
	for _, rel := range gf {
		if !slices.Contains(wf, rel) {
			t.Fatalf("unexpected file %s", rel)
		}
		if sha(t, filepath.Join(got, rel)) != sha(t, filepath.Join(want, rel)) {
			t.Fatalf("%s differs from the uninterrupted run's", rel)
		}
	}
}

// faultData is a demo table in four files with a model fitted on it, and
// the directory an uninterrupted score writes.
type faultData struct {
	dir, model, data, ref string
}

func newFaultData(t *testing.T) *faultData {
	t.Helper()
	if testing.Short() {
		t.Skip("needs child processes")
	}
	dir, model, _ := demoData(t, 240000, 4)
	d := &faultData{dir: dir, model: model, data: filepath.Join(dir, "data"), ref: filepath.Join(dir, "ref") + "/"}
	mustHeft(t, d.scoreArgs(d.ref)...)
	return d
}

func (d *faultData) scoreArgs(out string) []string {
	return []string{"score", "-q", "--model", d.model, "--workers", "1", "--batch-rows", "2000", "-o", out, d.data}
}

// SIGKILL at random moments of a score into a directory: the directory
// then holds only complete files (each byte-identical to the uninterrupted
// run's) and no _SUCCESS; temporary files are hidden; a rerun into the same
// directory removes them and gives the uninterrupted run's bytes.
func TestKillScoreIntoDirectory(t *testing.T) {
	d := newFaultData(t)
	before := treeHashes(t, d.data)
	out := filepath.Join(d.dir, "killed") + "/"
	rng := rand.New(rand.NewPCG(20261201, 9))
	delays := []time.Duration{5 * time.Millisecond, 40 * time.Millisecond}
	for range 5 {
		delays = append(delays, time.Duration(60+rng.IntN(700))*time.Millisecond)
	}
	killed := 0
	for _, delay := range delays {
		cmd, _ := child(t, d.scoreArgs(out)...)
		time.Sleep(delay)
		cmd.Process.Signal(syscall.SIGKILL)
		cmd.Wait()
		if cmd.ProcessState.Success() {
			continue // finished first; the next run overwrites its files
		}
		visible, _ := dirFiles(t, out)
		if slices.Contains(visible, "_SUCCESS") {
			// The kill came after the marker, while the run was writing its
			// state or ending: the directory must be the complete output.
			sameTree(t, d.ref, out, true)
			continue
		}
		killed++
		sameTree(t, d.ref, out, false)
		for _, rel := range visible {
			f, err := file.OpenParquetFile(filepath.Join(out, rel), false)
			if err != nil {
				t.Fatalf("kill at %v: %s is not readable: %v", delay, rel, err)
			}
			f.Close()
		}
		_, hidden := dirFiles(t, out)
		t.Logf("killed at %v: %d complete files, %d temporary", delay, len(visible), len(hidden))
	}
	if killed == 0 {
		t.Fatal("every run finished before its kill")
	}
	mustHeft(t, d.scoreArgs(out)...)
	sameTree(t, d.ref, out, true)
	if _, hidden := dirFiles(t, out); len(hidden) > 0 {
		t.Fatalf("the rerun left temporary files of killed runs: %v", hidden)
	}
	after := treeHashes(t, d.data)
	for p, h := range before {
		if after[p] != h {
			t.Fatalf("input %s changed", p)
		}
	}
}

// SIGINT and SIGTERM stop a run within a second with exit code 130, no
// file at the target and no temporary file left.
func TestSignalStop(t *testing.T) {
	if testing.Short() {
		t.Skip("needs child processes")
	}
	dir, model, paths := demoData(t, 300000, 1)
	for _, sig := range []os.Signal{os.Interrupt, syscall.SIGTERM} {
		t.Run(sig.String(), func(t *testing.T) {
			out := filepath.Join(dir, "sig-"+strings.ReplaceAll(sig.String(), " ", ""))
			os.MkdirAll(out, 0o755)
			args := []string{"score", "-q", "--model", model, "--workers", "1", "--batch-rows", "2000",
				"-o", filepath.Join(out, "scored.parquet"), "--state", filepath.Join(out, "state.json"), paths[0]}
			cmd, stderr := child(t, args...)
			// Wait until the run is writing, then signal.
			deadline := time.Now().Add(10 * time.Second)
			for {
				if _, hidden := dirFiles(t, out); len(hidden) > 0 {
					break
				}
				if time.Now().After(deadline) {
					cmd.Process.Kill()
					t.Fatal("the run never started writing")
				}
				time.Sleep(2 * time.Millisecond)
			}
			sent := time.Now()
			cmd.Process.Signal(sig)
			done := make(chan struct{})
			go func() { cmd.Wait(); close(done) }()
			select {
			case <-done:
			case <-time.After(5 * time.Second):
				cmd.Process.Kill()
				t.Fatalf("no stop within 5 s of %v", sig)
			}
			took := time.Since(sent)
			code := cmd.ProcessState.ExitCode()
			if code == 0 {
				t.Skip("the run finished before the signal arrived")
			}
			if code != ExitInterrupted {
				t.Fatalf("exit %d, want %d: %s", code, ExitInterrupted, stderr)
			}
			if took > time.Second {
				t.Errorf("stopped %v after the signal, want within 1 s", took)
			}
			line := errorLine(t, stderr.String())
			t.Logf("%v after %v: %s", sig, took, line)
			if !strings.Contains(line, sig.String()+" signal received: stopped") {
				t.Errorf("message %q does not say the run was stopped", line)
			}
			if visible, hidden := dirFiles(t, out); len(visible)+len(hidden) > 0 {
				t.Fatalf("a stopped run left %v %v", visible, hidden)
			}
		})
	}
}

// Two runs writing the same output directory at once do not corrupt each
// other: unique temporary names and atomic renames mean every file is one
// run's whole file, and both runs' files are the same bytes.
func TestConcurrentScoreSameDirectory(t *testing.T) {
	d := newFaultData(t)
	out := filepath.Join(d.dir, "shared") + "/"
	a, ea := child(t, d.scoreArgs(out)...)
	b, eb := child(t, d.scoreArgs(out)...)
	errA, errB := a.Wait(), b.Wait()
	if errA != nil || errB != nil {
		t.Fatalf("concurrent runs failed: %v %s / %v %s", errA, ea, errB, eb)
	}
	sameTree(t, d.ref, out, true)
	if _, hidden := dirFiles(t, out); len(hidden) > 0 {
		t.Fatalf("temporary files left: %v", hidden)
	}
}

// A full file system (a 1 MiB tmpfs) fails the write with a clear error and
// the output exit code, and removes the temporary file.
func TestFullDisk(t *testing.T) {
	if os.Getuid() != 0 {
		t.Skip("mounting a tmpfs needs root")
	}
	d := newFaultData(t)
	mnt := filepath.Join(d.dir, "small")
	os.Mkdir(mnt, 0o755)
	if out, err := exec.Command("mount", "-t", "tmpfs", "-o", "size=1m", "tmpfs", mnt).CombinedOutput(); err != nil {
		t.Skipf("cannot mount a tmpfs: %v %s", err, out)
	}
	defer exec.Command("umount", mnt).Run()
	in := filepath.Join(d.data, "part-00000.parquet")
	cases := []struct {
		name string
		args []string
	}{
		{"table", []string{"score", "-q", "--model", d.model, "-o", filepath.Join(mnt, "scored.parquet"), in}},
		{"directory", []string{"score", "-q", "--model", d.model, "-o", filepath.Join(mnt, "dir") + "/", d.data}},
		{"arrow", []string{"score", "-q", "--model", d.model, "-o", filepath.Join(mnt, "scored.arrow"), in}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			r := heft(t, c.args...)
			line := errorLine(t, r.stderr)
			t.Logf("exit %d: %s", r.code, line)
			if r.code != ExitOutput {
				t.Errorf("exit %d, want %d: %s", r.code, ExitOutput, line)
			}
			if !strings.Contains(line, "no space left on device") || !strings.Contains(line, mnt) {
				t.Errorf("message %q does not name the target and the cause", line)
			}
			visible, hidden := dirFiles(t, mnt)
			if len(hidden) > 0 || slices.ContainsFunc(visible, func(s string) bool { return strings.HasSuffix(s, ".parquet") || strings.HasSuffix(s, ".arrow") }) {
				t.Fatalf("left behind: %v %v", visible, hidden)
			}
			os.RemoveAll(filepath.Join(mnt, "dir"))
		})
	}
	// Model and state files on a full disk: fill it first.
	filler := filepath.Join(mnt, "filler")
	exec.Command("dd", "if=/dev/zero", "of="+filler, "bs=64k", "count=64").Run()
	for _, c := range []struct {
		name string
		args []string
	}{
		{"model", []string{"fit", "-q", "-o", filepath.Join(mnt, "model.json"), "--treatment", "audit", "--covariates", demoCovs, in}},
		{"state", []string{"score", "-q", "--model", d.model, "--report-only", "--state", filepath.Join(mnt, "state.json"), in}},
		{"report", []string{"score", "-q", "--model", d.model, "--report-only", "--report", filepath.Join(mnt, "report.json"), in}},
	} {
		t.Run(c.name, func(t *testing.T) {
			r := heft(t, c.args...)
			line := errorLine(t, r.stderr)
			t.Logf("exit %d: %s", r.code, line)
			if r.code != ExitOutput {
				t.Errorf("exit %d, want %d: %s", r.code, ExitOutput, line)
			}
			if !strings.Contains(line, "no space left on device") {
				t.Errorf("message %q does not give the cause", line)
			}
			visible, hidden := dirFiles(t, mnt)
			if len(hidden) > 0 || !slices.Equal(visible, []string{"filler"}) {
				t.Fatalf("left behind: %v %v", visible, hidden)
			}
		})
	}
}

// Output files get 0666 less the umask, like any file the user creates.
func TestOutputModes(t *testing.T) {
	old := syscall.Umask(0o022)
	defer syscall.Umask(old)
	e := newBadEnv(t)
	out := func(n string) string { return filepath.Join(e.out, n) }
	mustHeft(t, "score", "-q", "--model", e.model, "-o", out("t.parquet"), "--state", out("s.json"), "--report", out("r.json"), bad("good.parquet"))
	mustHeft(t, "score", "-q", "--model", e.model, "-o", out("t.arrow"), bad("good.parquet"))
	mustHeft(t, "score", "-q", "--model", e.model, "-o", out("d")+"/", bad("good.parquet"))
	mustHeft(t, "merge", "-q", "-o", out("m.json"), out("s.json"))
	for _, n := range []string{"t.parquet", "s.json", "r.json", "t.arrow", "d/good.parquet", "d/_SUCCESS", "m.json"} {
		st, err := os.Stat(out(n))
		if err != nil {
			t.Fatal(err)
		}
		if got := st.Mode().Perm(); got != 0o644 {
			t.Errorf("%s: mode %v, want 0644", n, got)
		}
	}
	if st, _ := os.Stat(e.model); st.Mode().Perm() != 0o644 {
		t.Errorf("model: mode %v, want 0644", st.Mode().Perm())
	}
}

// TestKillDuringSpill: a run killed while it encodes a large row group's
// appended columns to temporary files (one per column, beside the target)
// leaves nothing at the target, and the next run into the same place
// removes those files with its own temporary output.
func TestKillDuringSpill(t *testing.T) {
	if testing.Short() {
		t.Skip("needs a child process")
	}
	dir := t.TempDir()
	rows := int64(pipeline.DefaultSpillRows + 50000)
	_, paths, err := scenario.Write(context.Background(), filepath.Join(dir, "data"), scenario.Options{Rows: rows, Seed: 3, RowGroupRows: rows})
	if err != nil {
		t.Fatal(err)
	}
	model := filepath.Join(dir, "model.json")
	mustHeft(t, "fit", "-q", "-o", model, "--treatment", scenario.ColTreatment, "--covariates", demoCovs, "--sample-rows", "50000", paths[0])
	out := filepath.Join(dir, "out")
	if err := os.MkdirAll(out, 0o755); err != nil {
		t.Fatal(err)
	}
	target := filepath.Join(out, "scored.parquet")
	caught := false
	for attempt := 0; attempt < 5 && !caught; attempt++ {
		cmd, _ := child(t, "score", "-q", "--model", model, "--workers", "1", "--batch-rows", "4096", "-o", target, paths[0])
		deadline := time.Now().Add(20 * time.Second)
		for time.Now().Before(deadline) {
			if _, hidden := dirFiles(t, out); len(hidden) >= 2 { // the output's and a column's
				break
			}
			time.Sleep(time.Millisecond)
		}
		cmd.Process.Signal(syscall.SIGKILL)
		cmd.Wait()
		if cmd.ProcessState.Success() {
			os.Remove(target)
			continue
		}
		visible, hidden := dirFiles(t, out)
		if len(visible) != 0 {
			t.Fatalf("after the kill: %v at the target", visible)
		}
		caught = len(hidden) >= 2
	}
	if !caught {
		t.Fatal("no kill landed while the appended columns were being spilled")
	}
	mustHeft(t, "score", "-q", "--model", model, "-o", target, paths[0])
	visible, hidden := dirFiles(t, out)
	if len(hidden) != 0 || len(visible) != 1 {
		t.Fatalf("after a rerun: visible %v, hidden %v; want the output alone", visible, hidden)
	}
	pf, err := file.OpenParquetFile(target, false)
	if err != nil {
		t.Fatal(err)
	}
	defer pf.Close()
	if pf.NumRows() != rows {
		t.Fatalf("rerun wrote %d rows, want %d", pf.NumRows(), rows)
	}
}
