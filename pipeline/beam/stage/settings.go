package stage

import (
	"fmt"

	"github.com/heft-project/heft/aggregate"
	"github.com/heft-project/heft/fit"
	"github.com/heft-project/heft/score"
	"github.com/heft-project/heft/score/job"
)

// Settings are what every worker needs to score a part: heft score's
// flags and the model. Beam sends them to the workers inside the DoFns,
// encoded as JSON, so every field is plain data.
type Settings struct {
	Model     []byte // the model file's bytes: workers need not see the launcher's files
	ModelPath string // for messages
	// Policy is resolved against the model at launch (score.Policy.Resolve),
	// so every part applies the same truncation cap.
	Policy         score.Policy
	Columns        score.Columns
	Predictions    bool // Columns.Predictions, which Columns' JSON leaves out
	Unseen         string
	By             []string
	MinSegmentRows int
	MaxSegments    int
	Gate           aggregate.Gate
	Format         job.Format
	Reencode       bool
	Compression    string
	CompressionSet bool
	RowGroupRows   int64
	RowGroupSet    bool
	BatchRows      int
	BatchSet       bool
	Workers        int // scoring goroutines per part
	// Accumulate runs the accumulators (a report, a state or a gate was
	// asked for).
	Accumulate bool
	Version    string
}

// scoring is what a worker builds from Settings once, in Setup.
type scoring struct {
	model  *fit.Model
	runner *job.Runner
	acfg   aggregate.Config
}

// build decodes the model and makes what a worker scores with (scoringFor).
func (s *Settings) build(logf func(string, ...any)) (*scoring, error) {
	m, err := decodeModel(s.ModelPath, s.Model)
	if err != nil {
		return nil, err
	}
	return s.scoringFor(m, logf)
}

// decodeModel decodes a model file's bytes read from path.
func decodeModel(path string, b []byte) (*fit.Model, error) {
	m, err := fit.Unmarshal(b)
	if err != nil {
		return nil, &job.Error{Kind: job.KindModel, Err: fmt.Errorf("%s: %w", path, err)}
	}
	return m, nil
}

// scoringFor makes the Runner every part of the job scores with, for the
// model m: the one heft score makes from the same flags.
func (s *Settings) scoringFor(m *fit.Model, logf func(string, ...any)) (*scoring, error) {
	sc, err := score.New(m, s.Policy)
	if err != nil {
		return nil, &job.Error{Kind: job.KindModel, Err: err}
	}
	cols := s.Columns
	cols.Predictions = s.Predictions
	r := job.New(m, sc, job.Options{
		Columns: cols, Unseen: s.Unseen, By: s.By, Format: s.Format,
		Splice:      !s.Reencode && s.Format == job.Parquet,
		Compression: s.Compression, CompressionSet: s.CompressionSet,
		RowGroupRows: s.RowGroupRows, RowGroupSet: s.RowGroupSet,
		BatchRows: s.BatchRows, BatchSet: s.BatchSet, Workers: s.Workers,
		NeedOutcome: s.Accumulate || cols.Predictions,
		Version:     s.Version, Logf: logf,
	})
	acfg := aggregate.Config{Model: m, Policy: s.Policy, By: s.By, MinSegmentRows: s.MinSegmentRows,
		MaxSegments: s.MaxSegments, Gate: s.Gate}
	return &scoring{model: m, runner: r, acfg: acfg}, nil
}
