package stage

import (
	"encoding/json"
	"os"
	"path/filepath"
	"testing"
)

// TestMergeFnIsHeftMerge: the CombineFn over per-file states, fed in any
// order and split into partial accumulators that cross the wire
// (encodeAcc, decodeAcc), gives the report heft merge gives for the same
// state files, to relative 1e-12.
func TestMergeFnIsHeftMerge(t *testing.T) {
	data, model := table(t)
	dir := t.TempDir()
	files, _ := filepath.Glob(filepath.Join(data, "*", "*.parquet"))
	if len(files) != 4 {
		t.Fatalf("%d files", len(files))
	}
	var results []Result
	var states []string
	for i, f := range files {
		st := filepath.Join(dir, filepath.Base(filepath.Dir(f))+filepath.Base(f)+".json")
		heft(t, "score", "-m", model, "--report-only", "--state", st, "--by", "district", f)
		b, err := os.ReadFile(st)
		if err != nil {
			t.Fatal(err)
		}
		results = append(results, Result{Index: i, Rows: 1, State: b})
		states = append(states, st)
	}
	merged := filepath.Join(dir, "merged.json")
	heft(t, append([]string{"merge", "--report", merged}, states...)...)
	want := readJSON(t, merged)

	var fn mergeFn
	wire := func(a Acc) Acc {
		b, err := encodeAcc(a)
		if err != nil {
			t.Fatal(err)
		}
		back, err := decodeAcc(b)
		if err != nil {
			t.Fatal(err)
		}
		return back
	}
	for _, order := range [][]int{{0, 1, 2, 3}, {3, 2, 1, 0}, {2, 0, 3, 1}} {
		// Two partial combines, each sent over the wire, then merged.
		a, b := fn.CreateAccumulator(), fn.CreateAccumulator()
		var err error
		for k, i := range order {
			if k < 2 {
				a, err = fn.AddInput(a, results[i])
			} else {
				b, err = fn.AddInput(b, results[i])
			}
			if err != nil {
				t.Fatal(err)
			}
		}
		total, err := fn.MergeAccumulators(wire(b), wire(a))
		if err != nil {
			t.Fatal(err)
		}
		total = fn.ExtractOutput(total)
		if len(total.Parts) != 4 || total.Parts[0] != 0 || total.Parts[3] != 3 || total.Rows != 4 {
			t.Fatalf("order %v: parts %v, rows %d", order, total.Parts, total.Rows)
		}
		rep := total.State.Report()
		rep.Inputs = nil
		b2, _ := json.Marshal(rep)
		var got any
		json.Unmarshal(b2, &got)
		w := want.(map[string]any)
		w["inputs"] = nil
		sameJSON(t, "merged report", w, got)
	}

	// An accumulator without a state (no accumulators asked for) crosses
	// the wire as it is.
	if a := wire(Acc{Parts: []int{2}, Rows: 5}); a.State != nil || a.Rows != 5 || len(a.Parts) != 1 {
		t.Fatalf("empty accumulator came back as %+v", a)
	}
}
