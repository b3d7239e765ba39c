package aggregate

import (
	"fmt"
	"math/rand/v2"
	"testing"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"
	"github.com/heft-project/heft/fit"
	"github.com/heft-project/heft/score"
)

// benchInput is an invented 65536-row batch (demo data): with levels nil,
// 20 numeric terms; otherwise 4 numeric terms and per categorical column
// the given number of levels besides the reference, one-hot encoded, as the
// demo table's model has (4, 7 and 1 levels: 16 terms).
func benchInput(b *testing.B, outcome, segments bool, levels []int) (*State, arrow.RecordBatch, *fit.Batch, *score.Scores) {
	const n = 65536
	p := 20
	if levels != nil {
		p = 4
		for _, l := range levels {
			p += l
		}
	}
	rng := rand.New(rand.NewPCG(3, 4))
	terms := []string{"intercept"}
	ref := fit.Reference{PropensityEdges: make([]float64, 51), PropensityDeciles: []float64{.1, .2, .3, .4, .5, .6, .7, .8, .9},
		DecileCounts: []float64{1, 1, 1, 1, 1, 1, 1, 1, 1, 1}}
	for k := range ref.PropensityEdges {
		ref.PropensityEdges[k] = float64(k) / 50
	}
	bt := &fit.Batch{N: n, X: make([][]float64, p), T: make([]int8, n)}
	sc := &score.Scores{N: n, E: make([]float64, n), W: make([]float64, n), WValid: make([]bool, n), InSupport: make([]bool, n)}
	for j := 0; j < p; j++ {
		name := fmt.Sprintf("x%d", j+1)
		terms = append(terms, name)
		ref.Terms = append(ref.Terms, fit.TermReference{Term: name, Edges: []float64{-1.28, -.84, -.52, -.25, 0, .25, .52, .84, 1.28}, SD: 1})
		bt.X[j] = make([]float64, n)
		if levels == nil || j < 4 {
			for i := range bt.X[j] {
				bt.X[j][i] = rng.NormFloat64()
			}
		}
	}
	base := 4
	for _, l := range levels {
		for i := 0; i < n; i++ {
			// the reference level is as frequent as the others together
			if k := rng.IntN(2 * l); k < l {
				bt.X[base+k][i] = 1
			}
		}
		base += l
	}
	for i := 0; i < n; i++ {
		e := 0.05 + 0.9*rng.Float64()
		bt.T[i] = 0
		if rng.Float64() < e {
			bt.T[i] = 1
		}
		sc.E[i], sc.W[i], sc.WValid[i], sc.InSupport[i] = e, score.Weight(score.ATE, bt.T[i], e), true, true
	}
	m := &fit.Model{Propensity: fit.GLM{Family: fit.FamilyBinomial, Terms: terms, Coef: make([]float64, p+1)}, Reference: ref, Checksum: "sha256:bench"}
	if outcome {
		bt.Y, bt.YValid = make([]float64, n), make([]bool, n)
		sc.Mu0, sc.Mu1 = make([]float64, n), make([]float64, n)
		for i := 0; i < n; i++ {
			sc.Mu0[i] = bt.X[0][i]
			sc.Mu1[i] = sc.Mu0[i] + 1
			bt.Y[i] = sc.Mu0[i] + float64(bt.T[i]) + rng.NormFloat64()
			bt.YValid[i] = true
		}
		g := fit.GLM{Family: fit.FamilyGaussian, Terms: terms, Coef: make([]float64, p+1)}
		m.Outcome = &fit.OutcomeModels{Kind: "continuous", Treated: g, Control: g}
	}
	cfg := Config{Model: m, Policy: score.Policy{Estimand: score.ATE}}
	var rec arrow.RecordBatch
	if segments {
		sb := array.NewStringBuilder(memory.DefaultAllocator)
		for i := 0; i < n; i++ {
			sb.Append(fmt.Sprintf("segment-%02d", rng.IntN(16)))
		}
		col := sb.NewArray()
		sb.Release()
		schema := arrow.NewSchema([]arrow.Field{{Name: "seg", Type: arrow.BinaryTypes.String}}, nil)
		rec = array.NewRecordBatch(schema, []arrow.Array{col}, int64(n))
		col.Release()
		b.Cleanup(rec.Release)
		cfg.By = []string{"seg"}
	}
	s, err := New(cfg, recSchema(rec))
	if err != nil {
		b.Fatal(err)
	}
	return s, rec, bt, sc
}

func recSchema(rec arrow.RecordBatch) *arrow.Schema {
	if rec == nil {
		return nil
	}
	return rec.Schema()
}

// BenchmarkStateAdd measures Add on one 65536-row, 20-term batch, the way
// the engine calls it: a fresh State per batch, merged into the run's.
// "balance" has no outcome (balance, overlap, drift only); "outcome" adds
// the effect estimates; "segments" adds 16 segments of one string column;
// "demo" is "outcome" with the demo model's shape, 4 numeric terms and 12
// one-hot terms of 3 categorical columns.
func BenchmarkStateAdd(b *testing.B) {
	for _, c := range []struct {
		name              string
		outcome, segments bool
		levels            []int
	}{{"balance", false, false, nil}, {"outcome", true, false, nil}, {"segments", true, true, nil},
		{"demo", true, false, []int{4, 7, 1}}} {
		b.Run(c.name, func(b *testing.B) {
			run, rec, bt, sc := benchInput(b, c.outcome, c.segments, c.levels)
			b.ReportAllocs()
			b.ResetTimer()
			cpu0 := cpuSeconds()
			for i := 0; i < b.N; i++ {
				s := run.Empty()
				if err := s.Add(rec, bt, sc); err != nil {
					b.Fatal(err)
				}
				if err := run.Merge(s); err != nil {
					b.Fatal(err)
				}
			}
			b.ReportMetric(float64(bt.N)*float64(b.N)/b.Elapsed().Seconds(), "rows/s")
			b.ReportMetric((cpuSeconds()-cpu0)*1e9/(float64(bt.N)*float64(b.N)), "cpu-ns/row")
		})
	}
}
