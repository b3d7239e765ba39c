package score

import (
	"context"
	"encoding/json"
	"testing"
	"time"

	"github.com/heft-project/heft/fit"
	"github.com/heft-project/heft/pipeline"
)

// A model file that was edited and given a fresh checksum (by hand, or by
// a tool) is checked by Load, not trusted: whatever loads must score a batch
// without panicking, under any policy. The seed is a real model fitted on
// testdata/bad/good.parquet, scored against that file's first batch.
func FuzzScoreEditedModel(f *testing.F) {
	ctx := context.Background()
	in := pipeline.Input{Path: "../testdata/bad/good.parquet", Format: pipeline.FormatParquet}
	src, err := pipeline.Open(ctx, in, pipeline.SourceOptions{BatchRows: 64})
	if err != nil {
		f.Fatal(err)
	}
	so := fit.SampleOptions{Treatment: "t", Covariates: []string{"x1", "x2", "grp"}, Outcome: "y"}
	fr, err := fit.ReadSample(ctx, src, so)
	src.Close()
	if err != nil {
		f.Fatal(err)
	}
	m, e, tr, err := fit.Fit(ctx, fr, fit.Options{SampleOptions: so, GLM: fit.GLMOptions{Tol: 1e-10, MaxIter: 50}, Now: time.Unix(0, 0).UTC()})
	if err != nil {
		f.Fatal(err)
	}
	// One estimand's weight quantiles, on every 10th q, keep the seed small
	// (the full grid is most of a model file's bytes).
	wq := WeightQuantiles(e, tr, m.Reference.ShareTreated)[ATC]
	var few []fit.Quantile
	for i := 0; i < len(wq); i += 10 {
		few = append(few, wq[i])
	}
	m.Reference.WeightQuantiles = map[string][]fit.Quantile{ATC: append(few, wq[len(wq)-1])}
	m.Checksum = ""
	if m.Checksum, err = m.ComputeChecksum(); err != nil {
		f.Fatal(err)
	}
	seed, err := json.Marshal(m)
	if err != nil {
		f.Fatal(err)
	}
	if _, err := fit.Unmarshal(seed); err != nil {
		f.Fatal(err)
	}
	f.Add(seed)

	src, err = pipeline.Open(ctx, in, pipeline.SourceOptions{BatchRows: 64})
	if err != nil {
		f.Fatal(err)
	}
	defer src.Close()
	if !src.Next(ctx) {
		f.Fatal(src.Err())
	}
	rec := src.RecordBatch()
	schema := src.Schema()
	policies := []Policy{
		{Estimand: ATE},
		{Estimand: ATT, Stabilize: true, Clip: 0.01},
		{Estimand: Overlap, Trim: 0.1},
		{Estimand: ATC, TruncateQ: 0.99},
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		var edited fit.Model
		if json.Unmarshal(data, &edited) != nil {
			return
		}
		edited.Checksum = ""
		sum, err := edited.ComputeChecksum()
		if err != nil {
			return
		}
		edited.Checksum = sum
		b, err := json.Marshal(&edited)
		if err != nil {
			return
		}
		m, err := fit.Unmarshal(b)
		if err != nil {
			return
		}
		if m.CheckSchema(schema, in.Path) != nil {
			return
		}
		for _, unseen := range []string{fit.UnseenError, fit.UnseenReference} {
			enc, err := m.Encoding.Bind(schema, in.Path, m.Encoding.Outcome != nil, unseen)
			if err != nil {
				continue
			}
			var batch fit.Batch
			if enc.Encode(rec, src.Location(), &batch) != nil {
				continue
			}
			for _, p := range policies {
				p, err := p.Resolve(m)
				if err != nil {
					continue
				}
				sc, err := New(m, p)
				if err != nil {
					continue
				}
				var out Scores
				sc.Score(&batch, src.Location(), &out)
			}
		}
	})
}
