package stage

import (
	"context"
	"fmt"
	"os"
	"path/filepath"

	"github.com/apache/beam/sdks/v2/go/pkg/beam/log"

	"github.com/heft-project/heft/aggregate"
	"github.com/heft-project/heft/pipeline"
	"github.com/heft-project/heft/score/job"
)

// Result is what scoring a part gives the combine: the rows it scored and
// the accumulators' state of them (a state file's JSON; empty when no
// accumulators run).
type Result struct {
	Index int
	Rows  int64
	State []byte
}

// scoreFn scores one part per element into its output file.
type scoreFn struct {
	S  Settings
	sc *scoring
}

func (f *scoreFn) Setup(ctx context.Context) error {
	sc, err := f.S.build(func(format string, args ...any) { log.Infof(ctx, format, args...) })
	f.sc = sc
	return err
}

func (f *scoreFn) ProcessElement(ctx context.Context, p Part) (Result, error) {
	r, err := scorePart(ctx, f.sc, &f.S, p)
	if err != nil {
		return r, marked(err, ExitCode(err))
	}
	return r, nil
}

// scorePart scores p through the Runner heft score would use: spliced when
// its Parquet column chunks can be copied, committed atomically to
// p.Target. A retried part rewrites the same bytes.
func scorePart(ctx context.Context, sc *scoring, s *Settings, p Part) (Result, error) {
	in, rg := p.input(), p.rowGroups()
	r := sc.runner
	opt := pipeline.SourceOptions{BatchRows: s.BatchRows, PartitionColumns: true, RowGroups: rg}
	part, err := r.Open(ctx, in, opt, r.Plan(in, rg))
	if err != nil {
		return Result{}, err
	}
	defer part.Close()
	var state *aggregate.State
	if s.Accumulate {
		if state, err = aggregate.New(sc.acfg, part.Src.Schema()); err != nil {
			return Result{}, &job.Error{Kind: job.KindUsage, Err: err}
		}
	}
	if err := os.MkdirAll(filepath.Dir(p.Target), 0o755); err != nil {
		return Result{}, &job.Error{Kind: job.KindOutput, Err: err}
	}
	rows, err := r.Score(ctx, part, in, p.Target, state)
	if err != nil {
		return Result{}, err
	}
	if p.Rows >= 0 && rows != p.Rows {
		// The file changed since the launch read its footer.
		return Result{}, pipeline.At(p.Path, fmt.Errorf("%v: scored %d rows, but the footer read at launch gave %d: did the file change?", rg, rows, p.Rows))
	}
	res := Result{Index: p.Index, Rows: rows}
	if state != nil {
		if res.State, err = state.MarshalJSON(); err != nil {
			return Result{}, err
		}
	}
	return res, nil
}
