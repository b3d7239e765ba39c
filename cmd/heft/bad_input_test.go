package main

import (
	"crypto/sha256"
	"encoding/json"
	"io/fs"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"github.com/apache/arrow-go/v18/arrow/memory"
	"github.com/apache/arrow-go/v18/parquet/file"
	"github.com/apache/arrow-go/v18/parquet/pqarrow"
)

// badDir holds the files testdata/bad/gen writes (see testdata/README.md).
const badDir = "../../testdata/bad"

// badEnv is what the bad-input cases build on: a model fitted on
// good.parquet, models and states derived from it, and an output directory
// that must stay empty.
type badEnv struct {
	tmp, out string
	model    string // fitted on good.parquet: t ~ x1 + x2 + grp, outcome y
	files    map[string]string
}

func bad(name string) string { return filepath.Join(badDir, filepath.FromSlash(name)) }

func newBadEnv(t *testing.T) *badEnv {
	t.Helper()
	e := &badEnv{tmp: t.TempDir(), files: map[string]string{}}
	e.out = filepath.Join(e.tmp, "out")
	if err := os.Mkdir(e.out, 0o755); err != nil {
		t.Fatal(err)
	}
	e.model = filepath.Join(e.tmp, "model.json")
	mustHeft(t, "fit", "-q", "-o", e.model, "--treatment", "t", "--covariates", "x1,x2,grp", "--outcome", "y", bad("good.parquet"))
	b, err := os.ReadFile(e.model)
	if err != nil {
		t.Fatal(err)
	}
	write := func(name string, data []byte) {
		p := filepath.Join(e.tmp, name)
		if err := os.WriteFile(p, data, 0o644); err != nil {
			t.Fatal(err)
		}
		e.files[name] = p
	}
	write("model_truncated.json", b[:len(b)/3])
	var m map[string]any
	if err := json.Unmarshal(b, &m); err != nil {
		t.Fatal(err)
	}
	coef := m["propensity"].(map[string]any)["coef"].([]any)
	coef[1] = coef[1].(float64) + 0.25
	edited, _ := json.MarshalIndent(m, "", " ")
	write("model_edited.json", edited)
	json.Unmarshal(b, &m)
	m["format_version"] = 99
	newer, _ := json.MarshalIndent(m, "", " ")
	write("model_newer.json", newer)

	// States: one per model and policy, for the merge refusals.
	other := filepath.Join(e.tmp, "model_x1x2.json")
	mustHeft(t, "fit", "-q", "-o", other, "--treatment", "t", "--covariates", "x1,x2", bad("good.parquet"))
	for _, s := range []struct{ name, model, flag string }{
		{"state_ate.json", e.model, "--estimand=ate"},
		{"state_att.json", e.model, "--estimand=att"},
		{"state_stabilized.json", e.model, "--stabilize"},
		{"state_other_model.json", other, "--estimand=ate"},
	} {
		p := filepath.Join(e.tmp, s.name)
		mustHeft(t, "score", "-q", "--model", s.model, s.flag, "--report-only", "--state", p, bad("good.parquet"))
		e.files[s.name] = p
	}
	sb, err := os.ReadFile(e.files["state_ate.json"])
	if err != nil {
		t.Fatal(err)
	}
	write("state_truncated.json", sb[:len(sb)/2])
	return e
}

// treeHashes hashes every file under root, so a test can prove its inputs
// were left untouched.
func treeHashes(t *testing.T, roots ...string) map[string][32]byte {
	t.Helper()
	h := map[string][32]byte{}
	for _, root := range roots {
		err := filepath.WalkDir(root, func(p string, d fs.DirEntry, err error) error {
			if err != nil || d.IsDir() {
				return err
			}
			b, err := os.ReadFile(p)
			if err != nil {
				return err
			}
			h[p] = sha256.Sum256(b)
			return nil
		})
		if err != nil {
			t.Fatal(err)
		}
	}
	return h
}

// errorLine checks that stderr is one "heft: " line, plus the usage hint
// for usage errors, with no trace of a panic, and returns the line.
func errorLine(t *testing.T, stderr string) string {
	t.Helper()
	lines := strings.Split(strings.TrimRight(stderr, "\n"), "\n")
	if n := len(lines); n == 2 && lines[1] == "Run 'heft --help' for usage." {
		lines = lines[:1]
	}
	if len(lines) != 1 || !strings.HasPrefix(lines[0], "heft: ") {
		t.Fatalf("stderr is not one error line:\n%s", stderr)
	}
	for _, s := range []string{"panic", "goroutine ", "runtime error", "internal error"} {
		if strings.Contains(stderr, s) {
			t.Fatalf("stderr shows %q: %s", s, stderr)
		}
	}
	return lines[0]
}

// The bad-input table of DEVELOPERS.md ("Bad inputs"): every row is a case
// here. want lists what the one error line must name: the file, the column
// and, where the reader knows them, the row group and row.
func TestBadInputs(t *testing.T) {
	e := newBadEnv(t)
	before := treeHashes(t, badDir, e.tmp)
	fitArgs := func(out string, extra ...string) []string {
		return append([]string{"fit", "-q", "-o", filepath.Join(e.out, out), "--treatment", "t", "--covariates", "x1,x2,grp", "--outcome", "y"}, extra...)
	}
	score := func(in string, extra ...string) []string {
		args := []string{"score", "-q", "--model", e.model, "-o", filepath.Join(e.out, "scored.parquet"), "--report", filepath.Join(e.out, "report.json"), "--state", filepath.Join(e.out, "state.json")}
		return append(append(args, extra...), in)
	}
	scoreWith := func(model, in string) []string {
		return []string{"score", "-q", "--model", model, "-o", filepath.Join(e.out, "scored.parquet"), "--report", filepath.Join(e.out, "report.json"), in}
	}
	merge := func(states ...string) []string {
		args := []string{"merge", "-q", "-o", filepath.Join(e.out, "merged.json"), "--report", filepath.Join(e.out, "report.json")}
		for _, s := range states {
			args = append(args, e.files[s])
		}
		return args
	}
	cases := []struct {
		name string
		args []string
		code int
		want []string
	}{
		// Files.
		{"zero bytes", score(bad("empty.parquet")), ExitInput, []string{"empty.parquet", "not a Parquet file", "0 bytes"}},
		{"not parquet", score(bad("not_parquet.parquet")), ExitInput, []string{"not_parquet.parquet", "not a Parquet file", "PAR1"}},
		{"truncated footer", score(bad("truncated_footer.parquet")), ExitInput, []string{"truncated_footer.parquet", "truncated"}},
		{"truncated in a row group", score(bad("truncated_rowgroup.parquet")), ExitInput, []string{"truncated_rowgroup.parquet", "truncated"}},
		{"corrupt page header", score(bad("corrupt_page.parquet")), ExitInput, []string{"corrupt_page.parquet", "row group 1", `column "x1"`, "rows 200-399", "page header"}},
		{"corrupt page payload", score(bad("corrupt_payload.parquet")), ExitInput, []string{"corrupt_payload.parquet", "row group 0", `column "grp"`, "decompress"}},
		{"mixed schemas, fit", fitArgs("m.json", bad("mixed")), ExitInput, []string{"part-1.parquet", `column "x2"`, "part-0.parquet", "float64", "int64"}},
		{"mixed schemas, score to a directory", []string{"score", "-q", "--model", e.model, "-o", e.out + "/dir/", bad("mixed")}, ExitInput, []string{"part-1.parquet", `column "x2"`, "part-0.parquet"}},
		{"mixed schemas, score to a stream", []string{"score", "-q", "--model", e.model, "--report-only", "--report", filepath.Join(e.out, "report.json"), bad("mixed")}, ExitInput, []string{"part-1.parquet", `column "x2"`, "part-0.parquet"}},
		{"zero rows, fit", fitArgs("m.json", bad("zero_rows.parquet")), ExitInput, []string{"zero_rows.parquet", `treatment column "t"`, "0 rows read"}},

		// Columns.
		{"covariate missing", score(bad("missing_covariate.parquet")), ExitInput, []string{"missing_covariate.parquet", `column "x2"`, "not found"}},
		{"covariate missing, fit", fitArgs("m.json", bad("missing_covariate.parquet")), ExitInput, []string{"missing_covariate.parquet", "x2"}},
		{"string where a number is expected", score(bad("wrong_type.parquet")), ExitInput, []string{"wrong_type.parquet", `column "x1"`, "utf8", "float64"}},
		{"CSV: a word in a numeric column", fitArgs("m.json", bad("word_in_numbers.csv")), ExitInput, []string{"word_in_numbers.csv", "row 17", `column "x1"`, `"n/a?"`, "numeric column"}},
		{"CSV: a row with a field too many", fitArgs("m.json", bad("ragged.csv")), ExitInput, []string{"ragged.csv", "row 17", "line 19", "wrong number of fields"}},
		{"treatment 1/2", fitArgs("m.json", bad("treatment_1_2.parquet")), ExitInput, []string{"treatment_1_2.parquet", `treatment column "t"`, "0/1", `"2"`}},
		{"treatment strings", fitArgs("m.json", "--treated-value", "yes", bad("treatment_strings.parquet")), ExitInput, []string{"treatment_strings.parquet", `treatment column "t"`, "two arms", `"maybe"`}},
		{"treatment all one value", fitArgs("m.json", bad("treatment_constant.parquet")), ExitInput, []string{"treatment_constant.parquet", `treatment column "t"`, "two arms"}},
		{"treatment all null", fitArgs("m.json", bad("treatment_null.parquet")), ExitInput, []string{"treatment_null.parquet", `treatment column "t"`, "null"}},
		{"null covariate, missing=error", score(bad("covariate_null.parquet")), ExitInput, []string{"covariate_null.parquet", "row group 1", "row 257", `column "x1"`, "missing"}},
		{"NaN covariate, missing=error", score(bad("covariate_nan.parquet")), ExitInput, []string{"covariate_nan.parquet", "row group 0", "row 123", `column "x1"`, "missing"}},
		{"null covariate at fit, missing=error", fitArgs("m.json", bad("covariate_null.parquet")), ExitInput, []string{"covariate_null.parquet", "row 257", `column "x1"`, "missing-indicator policy"}},
		{"+Inf covariate", score(bad("covariate_inf.parquet")), ExitInput, []string{"covariate_inf.parquet", "row group 1", "row 301", `column "x1"`, "+Inf"}},
		{"-Inf covariate", score(bad("covariate_neginf.parquet")), ExitInput, []string{"covariate_neginf.parquet", "row group 0", "row 42", `column "x1"`, "-Inf"}},
		{"+Inf covariate, missing=indicator", fitArgs("m.json", "--missing", "indicator", bad("covariate_inf.parquet")), ExitInput, []string{"covariate_inf.parquet", "row group 1", "row 301", `column "x1"`, "+Inf"}},
		{"level unseen at fit", score(bad("unseen_level.parquet")), ExitInput, []string{"unseen_level.parquet", "row group 1", "row 250", `column "grp"`, `"zz"`, "reference policy"}},
		{"duplicate column names", score(bad("duplicate_names.parquet")), ExitInput, []string{"duplicate_names.parquet", `column "x1"`, "duplicate"}},

		// Models.
		{"model truncated", scoreWith(e.files["model_truncated.json"], bad("good.parquet")), ExitModel, []string{"model_truncated.json", "truncated"}},
		{"model edited", scoreWith(e.files["model_edited.json"], bad("good.parquet")), ExitModel, []string{"model_edited.json", "edited", "checksum"}},
		{"model from a newer format", scoreWith(e.files["model_newer.json"], bad("good.parquet")), ExitModel, []string{"model_newer.json", "version 99", "newer"}},
		{"column types changed since fit", score(bad("types_changed.parquet")), ExitInput, []string{"types_changed.parquet", `column "x2"`, "at fit"}},
		{"model is not JSON", scoreWith(bad("good.parquet"), bad("good.parquet")), ExitModel, []string{"good.parquet", "model"}},

		// Fitting.
		{"one row", fitArgs("m.json", bad("one_row.parquet")), ExitInput, []string{"one_row.parquet", `treatment column "t"`, "two arms"}},
		{"complete separation", fitArgs("m.json", bad("separation.parquet")), ExitFit, []string{"separation.parquet", "complete separation", `"x1"`}},
		{"collinear terms", []string{"fit", "-q", "-o", filepath.Join(e.out, "m.json"), "--treatment", "t", "--covariates", "x1,x2,x3", bad("collinear.parquet")}, ExitFit, []string{"collinear.parquet", "collinear", `"x1"`, `"x3"`}},
		{"more terms than rows", []string{"fit", "-q", "-o", filepath.Join(e.out, "m.json"), "--treatment", "t", "--covariates", "x1,x2,x3,x4,x5,x6", bad("few_rows.parquet")}, ExitFit, []string{"few_rows.parquet", "more terms than rows"}},

		// States.
		{"merge: different models", merge("state_ate.json", "state_other_model.json"), ExitModel, []string{"state_other_model.json", "different models"}},
		{"merge: different estimand", merge("state_ate.json", "state_att.json"), ExitModel, []string{"state_att.json", "different weighting policies", "att"}},
		{"merge: stabilized and not", merge("state_ate.json", "state_stabilized.json"), ExitModel, []string{"state_stabilized.json", "different weighting policies", "stabilize"}},
		{"merge: the same state twice", merge("state_ate.json", "state_ate.json"), ExitUsage, []string{"state_ate.json", "same state", "twice"}},
		{"merge: truncated state", merge("state_truncated.json"), ExitModel, []string{"state_truncated.json", "state file"}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			r := heft(t, c.args...)
			line := errorLine(t, r.stderr)
			t.Logf("exit %d: %s", r.code, line) // go test -v prints DEVELOPERS.md's table
			if r.code != c.code {
				t.Errorf("exit %d, want %d: %s", r.code, c.code, line)
			}
			for _, w := range c.want {
				if !strings.Contains(line, w) {
					t.Errorf("error does not name %q:\n%s", w, line)
				}
			}
			left, _ := filepath.Glob(filepath.Join(e.out, "*"))
			hidden, _ := filepath.Glob(filepath.Join(e.out, ".*"))
			if left = append(left, hidden...); len(left) > 0 {
				t.Errorf("a failed run left %v", left)
				for _, p := range left {
					os.RemoveAll(p)
				}
			}
		})
	}
	after := treeHashes(t, badDir, e.tmp)
	for p, h := range before {
		if after[p] != h {
			t.Errorf("input %s changed", p)
		}
	}
}

// Valid but unusual inputs go through: a file with zero rows gives a table
// with the output schema and a report of 0 rows; column names with spaces,
// unicode and dots work in fit and score.
func TestUnusualButValidInputs(t *testing.T) {
	e := newBadEnv(t)
	out := filepath.Join(e.out, "zero.parquet")
	rep := filepath.Join(e.out, "zero.json")
	mustHeft(t, "score", "-q", "--model", e.model, "-o", out, "--report", rep, bad("zero_rows.parquet"))
	if n := readReport(t, rep)["rows"]; n != 0.0 {
		t.Errorf("report says %v rows, want 0", n)
	}
	f, err := file.OpenParquetFile(out, false)
	if err != nil {
		t.Fatal(err)
	}
	fr, err := pqarrow.NewFileReader(f, pqarrow.ArrowReadProperties{}, memory.DefaultAllocator)
	if err != nil {
		t.Fatal(err)
	}
	sc, err := fr.Schema()
	if err != nil {
		t.Fatal(err)
	}
	if f.NumRows() != 0 || sc.NumFields() != 5+3 || sc.Field(5).Name != "propensity" {
		t.Errorf("zero-row output: %d rows, schema %v", f.NumRows(), sc)
	}
	f.Close()

	odd := filepath.Join(e.tmp, "odd.json")
	mustHeft(t, "fit", "-q", "-o", odd, "--treatment", "t", "--covariates", "floor area,región,a.b", "--outcome", "y", bad("odd_names.parquet"))
	r := mustHeft(t, "inspect", odd)
	for _, n := range []string{"floor area", "región", "a.b"} {
		if !strings.Contains(r.stdout, n) {
			t.Errorf("inspect does not show term %q", n)
		}
	}
	mustHeft(t, "score", "-q", "--model", odd, "-o", filepath.Join(e.out, "odd.parquet"), "--by", "a.b", bad("odd_names.parquet"))

	// The unseen level is scored as the reference level when asked.
	mustHeft(t, "score", "-q", "--model", e.model, "--unseen", "reference", "--report-only", "--report", filepath.Join(e.out, "u.json"), bad("unseen_level.parquet"))
	// Missing values with the indicator policy fit and score.
	ind := filepath.Join(e.tmp, "indicator.json")
	mustHeft(t, "fit", "-q", "-o", ind, "--treatment", "t", "--covariates", "x1,x2", "--missing", "indicator", "--ridge", "1", bad("covariate_nan.parquet"))
	mustHeft(t, "score", "-q", "--model", ind, "--report-only", "--report", filepath.Join(e.out, "n.json"), bad("covariate_null.parquet"))
}

// A directory output that meets a corrupt page in its second file fails with
// the page's location, keeps the first file whole and writes no _SUCCESS.
func TestDirectoryOutputStopsAtDamage(t *testing.T) {
	e := newBadEnv(t)
	in := filepath.Join(e.tmp, "in")
	os.Mkdir(in, 0o755)
	for name, from := range map[string]string{"a.parquet": "good.parquet", "b.parquet": "corrupt_page.parquet"} {
		b, err := os.ReadFile(bad(from))
		if err != nil {
			t.Fatal(err)
		}
		os.WriteFile(filepath.Join(in, name), b, 0o644)
	}
	out := filepath.Join(e.tmp, "scored")
	r := heft(t, "score", "-q", "--model", e.model, "-o", out+"/", in)
	line := errorLine(t, r.stderr)
	if r.code != ExitInput || !strings.Contains(line, "b.parquet: row group 1") {
		t.Fatalf("exit %d: %s", r.code, line)
	}
	visible, hidden := dirFiles(t, out)
	if !slices.Equal(visible, []string{"a.parquet"}) || len(hidden) > 0 {
		t.Fatalf("output directory holds %v %v, want a.parquet alone", visible, hidden)
	}
	one := filepath.Join(e.tmp, "a.parquet")
	mustHeft(t, "score", "-q", "--model", e.model, "-o", one, filepath.Join(in, "a.parquet"))
	if sha(t, one) != sha(t, filepath.Join(out, "a.parquet")) {
		t.Error("the file committed before the failure is not whole")
	}
}
