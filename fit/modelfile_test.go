package fit

import (
	"bytes"
	"encoding/json"
	"errors"
	"io/fs"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"
	"time"

	"github.com/apache/arrow-go/v18/arrow"
)

// testModel is a small consistent model over testEncoding's terms; the
// numbers are arbitrary.
func testModel() *Model {
	e := testEncoding()
	terms := e.Terms()
	p := len(terms)
	glm := func(family string, scale float64) GLM {
		g := GLM{Family: family, Terms: terms, N: 100, LogLik: -60.25, Deviance: 120.5, Scale: scale,
			Iterations: 6, Converged: true, Tol: 1e-10}
		for j := range p {
			g.Coef = append(g.Coef, 0.1*float64(j)-0.3)
			g.SE = append(g.SE, 0.01*float64(j+1))
			row := make([]float64, p)
			row[j] = g.SE[j] * g.SE[j]
			g.Cov = append(g.Cov, row)
		}
		return g
	}
	m := &Model{
		Format: FormatName, FormatVersion: FormatVersion, HeftVersion: "test",
		Created:  time.Date(2026, 6, 1, 12, 0, 0, 0, time.UTC).Format(time.RFC3339),
		Inputs:   []string{"a.parquet", "b.parquet"},
		Schema:   []Field{{Name: "t", Type: "int64"}, {Name: "age", Type: "int64", Nullable: true}},
		Encoding: *e, Propensity: glm(FamilyBinomial, 0),
		Outcome: &OutcomeModels{Kind: "continuous", Treated: glm(FamilyGaussian, 1.5), Control: glm(FamilyGaussian, 2.5)},
		Diagnostics: Diagnostics{RowsRead: 1000, SampleRows: 100, Sampled: true, Seed: 7, NTreated: 40, NControl: 60, AUC: 0.7,
			PropensityQuantiles: ArmQuantiles{Treated: []Quantile{{0, 0.1}, {1, 0.9}}, Control: []Quantile{{0, 0.05}, {1, 0.8}}},
			MissingCounts:       map[string]int{"inc": 3}},
		Reference: Reference{ShareTreated: 0.4, PropensityEdges: []float64{0, 0.5, 1}, PropensityCounts: []float64{60, 40},
			PropensityDeciles: []float64{0.2, 0.4}, DecileCounts: []float64{30, 30, 40},
			WeightQuantiles: map[string][]Quantile{"ate": {{0, 1.1}, {1, 20}}}},
	}
	for _, term := range terms[1:] {
		m.Reference.Terms = append(m.Reference.Terms, TermReference{Term: term, Edges: []float64{1, 2}, Mean: 1.5, SD: 0.5,
			MeanTreated: 1.25, SDTreated: 0.25, MeanControl: 1.75, SDControl: 0.75})
	}
	return m
}

func TestModelFileRoundTrip(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "model.json")
	m := testModel()
	if err := m.Save(path); err != nil {
		t.Fatal(err)
	}
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if mb, _ := m.Marshal(); !bytes.Equal(b, mb) {
		t.Fatal("Marshal and Save differ")
	}
	if !bytes.HasSuffix(b, []byte("}\n")) || !bytes.Contains(b, []byte("\n  \"format\": \"heft-model\"")) {
		t.Fatalf("not two-space indented with a trailing newline:\n%.200s", b)
	}
	if !strings.HasPrefix(m.Checksum, "sha256:") || len(m.Checksum) != 7+64 {
		t.Fatalf("checksum %q", m.Checksum)
	}
	got, err := Load(path)
	if err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(got, m) {
		t.Fatalf("loaded model differs:\n%+v\n%+v", got, m)
	}
	if entries, _ := os.ReadDir(dir); len(entries) != 1 {
		t.Fatalf("directory holds %d files after Save", len(entries))
	}
	// Saving again over the file replaces it.
	m.HeftVersion = "test2"
	if err := m.Save(path); err != nil {
		t.Fatal(err)
	}
	if got, err := Load(path); err != nil || got.HeftVersion != "test2" {
		t.Fatalf("after overwrite: %v, %v", got, err)
	}
	if err := m.Save(filepath.Join(dir, "no", "such", "dir", "m.json")); err == nil || !strings.Contains(err.Error(), "m.json") {
		t.Fatalf("save into a missing directory: %v", err)
	}
}

func TestModelFileRefusals(t *testing.T) {
	m := testModel()
	good, err := m.Marshal()
	if err != nil {
		t.Fatal(err)
	}
	resum := func(edit func(*Model)) []byte { // an internally edited model with a valid checksum
		c := testModel()
		edit(c)
		b, err := c.Marshal()
		if err != nil {
			t.Fatal(err)
		}
		return b
	}
	var compact, wide bytes.Buffer
	json.Compact(&compact, good)
	json.Indent(&wide, compact.Bytes(), "", "\t\t")
	cases := []struct {
		name string
		data []byte
		want string // "" = accepted
	}{
		{"as written", good, ""},
		{"compacted", compact.Bytes(), ""},
		{"re-indented", wide.Bytes(), ""},
		{"coefficient edited", bytes.Replace(good, []byte("-0.3,"), []byte("-0.31,"), 1), "model file was edited: checksum"},
		{"newer version", bytes.Replace(good, []byte(`"format_version": 1`), []byte(`"format_version": 2`), 1),
			"model format version 2 is newer than this heft supports (1); upgrade heft"},
		{"other format", bytes.Replace(good, []byte(`"heft-model"`), []byte(`"other-model"`), 1), `format is "other-model"`},
		{"truncated", good[:len(good)/2], "truncated at byte offset"},
		{"not JSON", append([]byte("{\"format\": x"), good[12:]...), "not valid JSON at byte offset 12"},
		{"wrong field type", bytes.Replace(good, []byte(`"n_treated": 40`), []byte(`"n_treated": "40"`), 1), `"diagnostics.n_treated"`},
		{"no checksum", resumNoChecksum(t), "no checksum"},
		{"coef length", resum(func(c *Model) { c.Propensity.Coef = c.Propensity.Coef[1:] }), "has 9 coefficients for 10 terms"},
		{"terms", resum(func(c *Model) {
			c.Propensity.Terms = append([]string{}, c.Propensity.Terms...)
			c.Propensity.Terms[2] = "x"
		}),
			"propensity model terms"},
		{"cov rows", resum(func(c *Model) { c.Propensity.Cov = c.Propensity.Cov[:3] }), "covariance has 3 rows"},
		{"cov cols", resum(func(c *Model) { c.Propensity.Cov[4] = c.Propensity.Cov[4][:2] }), "covariance row 4 has 2 entries"},
		{"outcome terms", resum(func(c *Model) { c.Outcome.Control.Terms = c.Outcome.Control.Terms[:4] }), "control-arm outcome model terms"},
		{"reference terms", resum(func(c *Model) { c.Reference.Terms[1].Term = "zzz" }), `reference term 2 is "zzz"`},
		{"reference count", resum(func(c *Model) { c.Reference.Terms = c.Reference.Terms[1:] }), "reference has 8 terms"},
		{"encoding and terms", resum(func(c *Model) { c.Encoding.Columns[2].Levels = []string{"s"} }), "do not match the encoding"},
	}
	dir := t.TempDir()
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			path := filepath.Join(dir, strings.ReplaceAll(c.name, " ", "_")+".json")
			if err := os.WriteFile(path, c.data, 0o644); err != nil {
				t.Fatal(err)
			}
			got, err := Load(path)
			if c.want == "" {
				if err != nil {
					t.Fatal(err)
				}
				if !reflect.DeepEqual(got, m) {
					t.Fatal("loaded model differs")
				}
				return
			}
			if err == nil {
				t.Fatalf("accepted; want %q", c.want)
			}
			if !strings.HasPrefix(err.Error(), path+": ") || !strings.Contains(err.Error(), c.want) {
				t.Fatalf("error %q, want it to start with the path and contain %q", err, c.want)
			}
		})
	}
	absent := filepath.Join(dir, "absent.json")
	if _, err := Load(absent); err == nil || !strings.HasPrefix(err.Error(), absent+": cannot read model file") || !errors.Is(err, fs.ErrNotExist) {
		t.Fatalf("absent file: %v", err)
	}
}

func resumNoChecksum(t *testing.T) []byte {
	m := testModel()
	m.Checksum = ""
	b, err := json.MarshalIndent(m, "", "  ")
	if err != nil {
		t.Fatal(err)
	}
	return b
}

func TestCheckSchema(t *testing.T) {
	m := testModel()
	f := func(name string, typ arrow.DataType) arrow.Field {
		return arrow.Field{Name: name, Type: typ, Nullable: true}
	}
	full := []arrow.Field{
		f("t", arrow.PrimitiveTypes.Int64), f("age", arrow.PrimitiveTypes.Int32), f("inc", arrow.PrimitiveTypes.Float64),
		f("reg", arrow.BinaryTypes.String), f("vip", arrow.FixedWidthTypes.Boolean), f("code", arrow.PrimitiveTypes.Int16),
	}
	cases := []struct {
		name   string
		fields []arrow.Field
		want   string
	}{
		{"no outcome column", full, ""},
		{"with outcome", append(full[:6:6], f("y", arrow.PrimitiveTypes.Float64)), ""},
		{"outcome of the wrong class", append(full[:6:6], f("y", arrow.BinaryTypes.String)), `column "y"`},
		{"covariate missing", full[:5], `column "code"`},
		{"class change", append(full[:5:5], f("code", arrow.PrimitiveTypes.Float64)), "float64 (floating-point) but was int16 (integer)"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			err := m.CheckSchema(arrow.NewSchema(c.fields, nil), "s.parquet")
			if c.want == "" {
				if err != nil {
					t.Fatal(err)
				}
				return
			}
			if err == nil || !strings.Contains(err.Error(), c.want) || !strings.HasPrefix(err.Error(), "s.parquet") {
				t.Fatalf("error %v, want %q", err, c.want)
			}
		})
	}
}
