package main

import (
	"bytes"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"github.com/heft-project/heft/pipeline/beam/internal/testbin"
)

type result struct {
	code   int
	stderr string
}

func heftBeam(t *testing.T, args ...string) result {
	t.Helper()
	cmd := exec.Command(testbin.HeftBeam(t), args...)
	var stderr bytes.Buffer
	cmd.Stderr = &stderr
	err := cmd.Run()
	code := 0
	if ee, ok := err.(*exec.ExitError); ok {
		code = ee.ExitCode()
	} else if err != nil {
		t.Fatal(err)
	}
	return result{code, stderr.String()}
}

// TestCommand runs the binary as a user does, on Prism: its exit codes
// are heft score's for the same mistakes, ExitJob for a job the runner
// failed, and the gate's after the outputs are written; never a stack
// trace.
func TestCommand(t *testing.T) {
	data, model := testbin.Table(t)
	dir := t.TempDir()
	out := filepath.Join(dir, "out") + "/"
	gated := filepath.Join(dir, "gated") + "/"
	for _, c := range []struct {
		name string
		args []string
		code int
		msg  string
	}{
		{"no input", []string{"-m", model, "-o", out}, ExitUsage, "no INPUT"},
		{"no model", []string{"-o", out, data}, ExitUsage, "--model is required"},
		{"unknown flag", []string{"--nope", data}, ExitUsage, "not defined"},
		{"bad format", []string{"-m", model, "-o", out, "--format", "csv", data}, ExitUsage, "--format"},
		{"model missing", []string{"-m", model + ".gone", "-o", out, data}, ExitModel, ".gone"},
		{"input missing", []string{"-m", model, "-o", out, filepath.Join(dir, "nothing.parquet")}, ExitInput, "nothing.parquet"},
		{"over the inputs", []string{"-m", model, "-o", data, data}, ExitUsage, "refusing to overwrite"},
		{"gate", []string{"-q", "-m", model, "-o", gated, "--report", filepath.Join(dir, "gate.json"), "--max-smd", "0.000001", data}, ExitGate, "gate"},
		{"gate on the state alone", []string{"-q", "-m", model, "-o", gated, "--state", filepath.Join(dir, "gate-state.json"), "--max-smd", "0.000001", data}, ExitGate, "gate"},
		{"report directory missing", []string{"-q", "-m", model, "-o", gated, "--report", filepath.Join(dir, "nowhere", "r.json"), data}, ExitOutput, "nowhere"},
		{"segments over the cap once merged", []string{"-q", "-m", model, "-o", filepath.Join(dir, "seg") + "/", "--part-rows", "20000", "--by", "year", "--max-segments", "1",
			"--report", filepath.Join(dir, "seg.json"), data}, ExitInput, "segments"},
		{"ok, flags after the input", []string{"-q", "-m", model, data, "-o", out, "--part-rows", "20000", "--report", filepath.Join(dir, "r.json")}, ExitOK, ""},
	} {
		t.Run(c.name, func(t *testing.T) {
			r := heftBeam(t, c.args...)
			if r.code != c.code || !strings.Contains(r.stderr, c.msg) {
				t.Fatalf("exit %d, want %d mentioning %q:\n%s", r.code, c.code, c.msg, r.stderr)
			}
			if strings.Contains(r.stderr, "goroutine ") || strings.Contains(r.stderr, "panic:") {
				t.Fatalf("stack trace on stderr:\n%s", r.stderr)
			}
		})
	}
	if _, err := os.Stat(filepath.Join(out, "_SUCCESS")); err != nil {
		t.Fatal("no success marker after the run that succeeded:", err)
	}

	// A value only a worker finds: the job fails with heft score's exit
	// code and message, and the directory has no success marker.
	spoilt := filepath.Join(dir, "spoilt")
	os.MkdirAll(spoilt, 0o755)
	b, _ := os.ReadFile(filepath.Join(data, "year=2027", "demo.parquet"))
	os.WriteFile(filepath.Join(spoilt, "a.parquet"), b, 0o644)
	testbin.Spoil(t, filepath.Join(spoilt, "a.parquet"), 4321)
	failed := filepath.Join(dir, "failed") + "/"
	r := heftBeam(t, "-q", "-m", model, "-o", failed, "--part-rows", "10000", spoilt)
	want := "heft-beam: the job failed; no _SUCCESS was written: " + filepath.Join(spoilt, "a.parquet") + ": row group 1: row 4321: column \"audit\": treatment value \"2\""
	if r.code != ExitInput || !strings.Contains(r.stderr, want) {
		t.Fatalf("a bad value in one part: exit %d, want %d with heft's message\n%s", r.code, ExitInput, r.stderr)
	}
	t.Logf("the failed job's message:\n%s", r.stderr)
	if _, err := os.Stat(filepath.Join(failed, "_SUCCESS")); err == nil {
		t.Fatal("a success marker after a failed job")
	}

	// A broken file is found at launch, before the job starts.
	bad := filepath.Join(dir, "bad")
	os.MkdirAll(bad, 0o755)
	os.WriteFile(filepath.Join(bad, "a.parquet"), b, 0o644)
	os.WriteFile(filepath.Join(bad, "b.parquet"), []byte("PAR1 not really"), 0o644)
	r = heftBeam(t, "-q", "-m", model, "-o", filepath.Join(dir, "badout")+"/", bad)
	if r.code != ExitInput || !strings.Contains(r.stderr, "b.parquet") {
		t.Fatalf("a broken file found at launch: exit %d\n%s", r.code, r.stderr)
	}
}
