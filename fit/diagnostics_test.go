package fit

import (
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"slices"
	"testing"
)

type diagRef struct {
	AUC []struct {
		Name  string    `json:"name"`
		Score []float64 `json:"score"`
		T     []int8    `json:"t"`
		AUC   float64   `json:"auc"`
	} `json:"auc"`
	Quantiles []struct {
		Name    string    `json:"name"`
		X       []float64 `json:"x"`
		Q       []float64 `json:"q"`
		Value   []float64 `json:"value"`
		Deciles []float64 `json:"deciles"`
	} `json:"quantiles"`
}

func loadDiagRef(t *testing.T) *diagRef {
	t.Helper()
	b, err := os.ReadFile(filepath.Join("..", "testdata", "ref", "glm", "diagnostics.json"))
	if err != nil {
		t.Fatal(err)
	}
	var r diagRef
	if err := json.Unmarshal(b, &r); err != nil {
		t.Fatal(err)
	}
	return &r
}

// bruteAUC counts every treated–control pair, ties 1/2: the definition.
func bruteAUC(s []float64, t []int8) float64 {
	var num, pairs float64
	for i := range s {
		if t[i] != 1 {
			continue
		}
		for j := range s {
			if t[j] != 0 {
				continue
			}
			pairs++
			switch {
			case s[i] > s[j]:
				num++
			case s[i] == s[j]:
				num += 0.5
			}
		}
	}
	return num / pairs
}

func TestAUC(t *testing.T) {
	// reference: scipy.stats.mannwhitneyu U1/(n1·n0),
	// testdata/ref/glm/diagnostics.json; and the pairwise definition.
	for _, c := range loadDiagRef(t).AUC {
		t.Run(c.Name, func(t *testing.T) {
			got := AUC(c.Score, c.T)
			if math.Abs(got-c.AUC) > 1e-12 {
				t.Errorf("AUC %.15g, scipy %.15g", got, c.AUC)
			}
			if b := bruteAUC(c.Score, c.T); math.Abs(got-b) > 1e-12 {
				t.Errorf("AUC %.15g, pairwise count %.15g", got, b)
			}
		})
	}
	// Rows with t = −1 (null treatment) and NaN scores are skipped.
	s := []float64{0.1, 0.9, math.NaN(), 0.5, 0.3}
	tt := []int8{0, 1, 1, -1, 1}
	if got := AUC(s, tt); got != 1 {
		t.Errorf("AUC with skipped rows %v, want 1", got)
	}
	if got := AUC([]float64{1, 2}, []int8{1, 1}); !math.IsNaN(got) {
		t.Errorf("AUC with one arm %v, want NaN", got)
	}
}

func TestQuantiles(t *testing.T) {
	// reference: numpy.quantile(method="linear"), testdata/ref/glm/diagnostics.json.
	for _, c := range loadDiagRef(t).Quantiles {
		t.Run(c.Name, func(t *testing.T) {
			orig := slices.Clone(c.X)
			got := Quantiles(c.X, c.Q)
			if !slices.Equal(orig, c.X) {
				t.Fatal("Quantiles modified its input")
			}
			for k, q := range got {
				if q.Q != c.Q[k] || math.Abs(q.Value-c.Value[k]) > 1e-14*math.Max(1, math.Abs(c.Value[k])) {
					t.Errorf("q=%v: %.17g, numpy %.17g", c.Q[k], q.Value, c.Value[k])
				}
			}
			// DecileEdges are numpy's deciles with repeats dropped.
			var want []float64
			for _, v := range c.Deciles {
				if len(want) == 0 || v > want[len(want)-1]+1e-14*math.Max(1, math.Abs(v)) {
					want = append(want, v)
				}
			}
			edges := DecileEdges(c.X)
			if len(edges) != len(want) {
				t.Fatalf("decile edges %v, want %v", edges, want)
			}
			for k := range want {
				if math.Abs(edges[k]-want[k]) > 1e-14*math.Max(1, math.Abs(want[k])) {
					t.Errorf("decile edge %d: %v, want %v", k, edges[k], want[k])
				}
			}
		})
	}
	if Quantiles([]float64{math.NaN()}, []float64{0.5}) != nil || DecileEdges(nil) != nil {
		t.Error("no values should give nil")
	}
}

func TestHistogram(t *testing.T) {
	edges := []float64{0, 1, 2, 3}
	for _, c := range []struct {
		name string
		x    []float64
		want []float64
	}{
		{"interior", []float64{0.5, 1.5, 2.5}, []float64{1, 1, 1}},
		{"left-closed bins", []float64{0, 1, 2}, []float64{1, 1, 1}},
		{"last bin closed", []float64{3}, []float64{0, 0, 1}},
		{"outside to end bins", []float64{-5, 7, math.Inf(1)}, []float64{1, 0, 2}},
		{"NaN skipped", []float64{math.NaN(), 1.2}, []float64{0, 1, 0}},
		{"empty", nil, []float64{0, 0, 0}},
	} {
		t.Run(c.name, func(t *testing.T) {
			if got := Histogram(c.x, edges); !slices.Equal(got, c.want) {
				t.Errorf("Histogram(%v) = %v, want %v", c.x, got, c.want)
			}
		})
	}
	if Histogram([]float64{1}, []float64{0}) != nil {
		t.Error("one edge should give nil")
	}
	// Property: every non-NaN value is counted once.
	x := make([]float64, 1000)
	for i := range x {
		x[i] = math.Sin(float64(i)) * 4
	}
	var total float64
	for _, c := range Histogram(x, DecileEdges(x)) {
		total += c
	}
	if total != 1000 {
		t.Errorf("histogram total %v, want 1000", total)
	}
}
