package main

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/json"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/ipc"

	"github.com/heft-project/heft/cmd/heft/scenario"
)

// TestMain lets a test run this binary's main as a child process, for the
// tests that need a real process (signals, SIGKILL).
func TestMain(m *testing.M) {
	if os.Getenv("HEFT_TEST_MAIN") == "1" {
		main()
		return
	}
	os.Exit(m.Run())
}

type result struct {
	code           int
	stdout, stderr string
}

func heft(t *testing.T, args ...string) result {
	t.Helper()
	var out, errb bytes.Buffer
	code := run(context.Background(), args, strings.NewReader(""), &out, &errb)
	return result{code, out.String(), errb.String()}
}

func mustHeft(t *testing.T, args ...string) result {
	t.Helper()
	r := heft(t, args...)
	if r.code != 0 {
		t.Fatalf("heft %s: exit %d\n%s", strings.Join(args, " "), r.code, r.stderr)
	}
	return r
}

var demoCovs = strings.Join(scenario.Covariates, ",")

// demoData writes a small demo table (files parts) and fits a model on it.
func demoData(t *testing.T, rows int64, files int) (dir, model string, paths []string) {
	t.Helper()
	dir = t.TempDir()
	_, paths, err := scenario.Write(context.Background(), filepath.Join(dir, "data"), scenario.Options{Rows: rows, Seed: 7, Files: files, RowGroupRows: 4096})
	if err != nil {
		t.Fatal(err)
	}
	model = filepath.Join(dir, "model.json")
	mustHeft(t, append([]string{"fit", "-q", "-o", model, "--treatment", scenario.ColTreatment, "--covariates", demoCovs,
		"--outcome", scenario.ColOutcome}, paths...)...)
	return dir, model, paths
}

func sha(t *testing.T, path string) [32]byte {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	return sha256.Sum256(b)
}

func readReport(t *testing.T, path string) map[string]any {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	var m map[string]any
	if err := json.Unmarshal(b, &m); err != nil {
		t.Fatal(err)
	}
	return m
}

func TestVersion(t *testing.T) {
	r := mustHeft(t, "version")
	if !strings.Contains(r.stdout, Version) || !strings.Contains(r.stdout, "model format") {
		t.Fatalf("version output %q", r.stdout)
	}
}

// Output bytes are a function of input, model and options only: the same
// whatever the number of workers, and the same on a rerun.
func TestScoreDeterministic(t *testing.T) {
	dir, model, paths := demoData(t, 30000, 1)
	var sums [][32]byte
	for i, w := range []string{"1", "2", "3", "2"} {
		out := filepath.Join(dir, "out"+string(rune('a'+i))+".parquet")
		mustHeft(t, "score", "-q", "--model", model, "--workers", w, "--batch-rows", "5000", "-o", out, paths[0])
		sums = append(sums, sha(t, out))
	}
	for i := 1; i < len(sums); i++ {
		if sums[i] != sums[0] {
			t.Fatalf("run %d differs from run 0", i)
		}
	}
}

// Partition states merged in any order give the single-pass report.
func TestMergeEqualsSinglePass(t *testing.T) {
	dir, model, paths := demoData(t, 30000, 3)
	single := filepath.Join(dir, "single.json")
	mustHeft(t, append([]string{"score", "-q", "--model", model, "--report-only", "--report", single}, paths...)...)
	var states []string
	for i, p := range paths {
		s := filepath.Join(dir, "state"+string(rune('0'+i))+".json")
		mustHeft(t, "score", "-q", "--model", model, "--report-only", "--state", s, p)
		states = append(states, s)
	}
	merged := filepath.Join(dir, "merged.json")
	mustHeft(t, "merge", "-q", "--report", merged, states[2], states[0], states[1])
	a, b := readReport(t, single)["estimates"], readReport(t, merged)["estimates"]
	compareNumbers(t, "estimates", a, b, 1e-12)
}

func compareNumbers(t *testing.T, path string, a, b any, rel float64) {
	t.Helper()
	switch x := a.(type) {
	case map[string]any:
		y, ok := b.(map[string]any)
		if !ok || len(x) != len(y) {
			t.Fatalf("%s: shapes differ: %v vs %v", path, a, b)
		}
		for k := range x {
			compareNumbers(t, path+"."+k, x[k], y[k], rel)
		}
	case []any:
		y, ok := b.([]any)
		if !ok || len(x) != len(y) {
			t.Fatalf("%s: lengths differ", path)
		}
		for i := range x {
			compareNumbers(t, path, x[i], y[i], rel)
		}
	case float64:
		y := b.(float64)
		if math.Abs(x-y) > rel*math.Max(math.Abs(x), math.Abs(y)) {
			t.Errorf("%s: %v vs %v", path, x, y)
		}
	}
}

// An Arrow IPC stream on stdout carries every row with the appended columns.
func TestScoreToStdoutStream(t *testing.T) {
	_, model, paths := demoData(t, 12000, 1)
	r := mustHeft(t, "score", "-q", "--model", model, "--predictions", "-o", "-", paths[0])
	rd, err := ipc.NewReader(strings.NewReader(r.stdout))
	if err != nil {
		t.Fatal(err)
	}
	defer rd.Release()
	want := []string{"propensity", "weight", "in_support", "mu0", "mu1"}
	s := rd.Schema()
	if s.NumFields() != len(scenario.Schema().Fields())+len(want) {
		t.Fatalf("schema %v", s)
	}
	for i, n := range want {
		if got := s.Field(len(scenario.Schema().Fields()) + i).Name; got != n {
			t.Errorf("appended column %d is %q, want %q", i, got, n)
		}
	}
	var rows int64
	for rd.Next() {
		rec := rd.RecordBatch()
		rows += rec.NumRows()
		e := rec.Column(s.NumFields() - 5).(*array.Float64)
		for i := 0; i < e.Len(); i++ {
			if v := e.Value(i); !(v > 0 && v < 1) {
				t.Fatalf("propensity %v", v)
			}
		}
	}
	if rows != 12000 {
		t.Fatalf("%d rows", rows)
	}
}

// A directory output that is the input directory (or would put an output
// on an input by another path) is refused before anything is written: it
// would replace the inputs by their scored copies.
func TestScoreDirectoryOverInputs(t *testing.T) {
	dir, model, paths := demoData(t, 3000, 2)
	data := filepath.Join(dir, "data")
	before, err := os.ReadFile(paths[0])
	if err != nil {
		t.Fatal(err)
	}
	for _, out := range []string{data + "/", data + "/./", filepath.Join(dir, "link") + "/"} {
		os.Symlink(data, filepath.Join(dir, "link"))
		r := heft(t, "score", "-q", "--model", model, "-o", out, data)
		if r.code != ExitUsage || !strings.Contains(r.stderr, "refusing to overwrite") {
			t.Fatalf("-o %s over its inputs: exit %d\n%s", out, r.code, r.stderr)
		}
		if after, _ := os.ReadFile(paths[0]); !bytes.Equal(after, before) {
			t.Fatal("the input was modified")
		}
		if _, err := os.Stat(filepath.Join(data, "_SUCCESS")); err == nil {
			t.Fatal("a success marker among the inputs")
		}
	}
}

// A directory output keeps one file per input and ends with _SUCCESS.
func TestScoreDirectory(t *testing.T) {
	dir, model, _ := demoData(t, 9000, 3)
	out := filepath.Join(dir, "scored") + "/"
	mustHeft(t, "score", "-q", "--model", model, "-o", out, filepath.Join(dir, "data"))
	for _, n := range []string{"part-00000.parquet", "part-00001.parquet", "part-00002.parquet", "_SUCCESS"} {
		if _, err := os.Stat(filepath.Join(out, n)); err != nil {
			t.Error(err)
		}
	}
}

func TestExitCodes(t *testing.T) {
	dir, model, paths := demoData(t, 6000, 1)
	edited := filepath.Join(dir, "edited.json")
	b, _ := os.ReadFile(model)
	os.WriteFile(edited, bytes.Replace(b, []byte(`"intercept"`), []byte(`"intercept" `), 1), 0o644)
	var m map[string]any
	json.Unmarshal(b, &m)
	m["propensity"].(map[string]any)["coef"].([]any)[1] = 0.5
	tampered, _ := json.Marshal(m)
	tamperedPath := filepath.Join(dir, "tampered.json")
	os.WriteFile(tamperedPath, tampered, 0o644)
	cases := []struct {
		name string
		args []string
		code int
		msg  string
	}{
		{"no args", []string{"score"}, ExitUsage, "requires at least 1 arg"},
		{"unknown flag", []string{"score", "--nope", "x"}, ExitUsage, "unknown flag"},
		{"bad estimand", []string{"score", "--model", model, "--estimand", "late", "-o", filepath.Join(dir, "o.parquet"), paths[0]}, ExitUsage, "estimand"},
		{"no input file", []string{"score", "--model", model, "-o", filepath.Join(dir, "o.parquet"), filepath.Join(dir, "missing.parquet")}, ExitInput, "missing.parquet"},
		{"missing covariate", []string{"fit", "-o", filepath.Join(dir, "m2.json"), "--treatment", "audit", "--covariates", "dwelling_age,shoe_size", paths[0]}, ExitInput, "shoe_size"},
		{"model missing", []string{"score", "--model", filepath.Join(dir, "nomodel.json"), "-o", filepath.Join(dir, "o.parquet"), paths[0]}, ExitModel, "nomodel.json"},
		{"model tampered", []string{"score", "--model", tamperedPath, "-o", filepath.Join(dir, "o.parquet"), paths[0]}, ExitModel, "checksum"},
		{"output is input", []string{"score", "--model", model, "-o", paths[0], paths[0]}, ExitUsage, "one of the inputs"},
		{"gate", []string{"score", "-q", "--model", model, "--report-only", "--report", filepath.Join(dir, "gate.json"), "--max-smd", "0.000001", paths[0]}, ExitGate, "gate"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			r := heft(t, c.args...)
			if r.code != c.code {
				t.Fatalf("exit %d, want %d\n%s", r.code, c.code, r.stderr)
			}
			if !strings.Contains(r.stderr, c.msg) {
				t.Errorf("stderr %q does not mention %q", r.stderr, c.msg)
			}
			if strings.Contains(r.stderr, "goroutine ") || strings.Contains(r.stderr, "panic") {
				t.Errorf("stack trace on stderr: %s", r.stderr)
			}
		})
	}
	if _, err := os.Stat(filepath.Join(dir, "o.parquet")); err == nil {
		t.Error("a failed run left an output file")
	}
	if _, err := os.Stat(filepath.Join(dir, "gate.json")); err != nil {
		t.Error("a failed gate must still write the report:", err)
	}
	// the reformatted (but not edited) model is still accepted
	mustHeft(t, "inspect", edited)
}

// SIGKILL in the middle of a write leaves nothing at the target and the
// input untouched; a rerun succeeds.
func TestKillMidWrite(t *testing.T) {
	if testing.Short() {
		t.Skip("needs a child process")
	}
	dir, model, paths := demoData(t, 300000, 1)
	before := sha(t, paths[0])
	ref := filepath.Join(dir, "ref.parquet")
	mustHeft(t, "score", "-q", "--model", model, "--workers", "1", "--batch-rows", "2000", "-o", ref, paths[0])
	out := filepath.Join(dir, "killed.parquet")
	interrupted := 0
	for _, delay := range []time.Duration{10 * time.Millisecond, 30 * time.Millisecond, 60 * time.Millisecond, 120 * time.Millisecond, 300 * time.Millisecond} {
		cmd := exec.Command(os.Args[0], "score", "-q", "--model", model, "--workers", "1", "--batch-rows", "2000", "-o", out, paths[0])
		cmd.Env = append(os.Environ(), "HEFT_TEST_MAIN=1")
		if err := cmd.Start(); err != nil {
			t.Fatal(err)
		}
		time.Sleep(delay)
		cmd.Process.Signal(syscall.SIGKILL)
		cmd.Wait()
		if cmd.ProcessState.ExitCode() == 0 {
			os.Remove(out) // finished before the kill: nothing to learn from this one
			continue
		}
		if _, err := os.Stat(out); err == nil {
			// The kill came after the commit (the rename), while the
			// process was ending: the file must be the whole output.
			if sha(t, out) != sha(t, ref) {
				t.Fatalf("after SIGKILL at %v the target holds a file that is not the complete output", delay)
			}
			os.Remove(out)
			continue
		}
		interrupted++
	}
	if interrupted == 0 {
		t.Fatal("every run finished before its SIGKILL: the test proved nothing; use a larger table")
	}
	if sha(t, paths[0]) != before {
		t.Fatal("the input changed")
	}
	mustHeft(t, "score", "-q", "--model", model, "-o", out, paths[0])
	if _, err := os.Stat(out); err != nil {
		t.Fatal(err)
	}
}

// SIGINT stops a run cleanly with its own exit code and no output.
func TestInterrupt(t *testing.T) {
	if testing.Short() {
		t.Skip("needs a child process")
	}
	dir, model, paths := demoData(t, 300000, 1)
	out := filepath.Join(dir, "interrupted.parquet")
	cmd := exec.Command(os.Args[0], "score", "-q", "--model", model, "--workers", "1", "--batch-rows", "2000", "-o", out, paths[0])
	cmd.Env = append(os.Environ(), "HEFT_TEST_MAIN=1")
	var stderr bytes.Buffer
	cmd.Stderr = &stderr
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	time.Sleep(150 * time.Millisecond)
	cmd.Process.Signal(os.Interrupt)
	done := make(chan struct{})
	go func() { cmd.Wait(); close(done) }()
	select {
	case <-done:
	case <-time.After(5 * time.Second):
		cmd.Process.Kill()
		t.Fatal("no stop within 5 s of SIGINT")
	}
	code := cmd.ProcessState.ExitCode()
	if code == 0 {
		t.Skip("the run finished before the signal arrived")
	}
	if code != ExitInterrupted {
		t.Fatalf("exit %d, want %d: %s", code, ExitInterrupted, stderr.String())
	}
	if _, err := os.Stat(out); err == nil {
		t.Fatal("an interrupted run left its output")
	}
	left, _ := filepath.Glob(filepath.Join(dir, ".*heft-tmp*"))
	if len(left) > 0 {
		t.Fatalf("temporary files left: %v", left)
	}
}
