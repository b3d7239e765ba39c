package job

import (
	"io"
	"os"

	"github.com/apache/arrow-go/v18/arrow/memory"

	"github.com/heft-project/heft/fit"
	"github.com/heft-project/heft/score"
)

// Version is heft's release version, written into model files, output
// metadata and reports. heft and heft-beam share it, so a table scored by
// either carries the same metadata.
const Version = "0.1.0"

// Format is the output table's format.
type Format int

const (
	Parquet Format = iota
	Arrow
)

// Ext is the format's file extension.
func (f Format) Ext() string {
	if f == Arrow {
		return ".arrow"
	}
	return ".parquet"
}

// Options are a scoring run's settings, the heft score flags that every
// part shares.
type Options struct {
	Columns score.Columns // names of the appended columns, and whether mu0/mu1 are
	Unseen  string        // fit.UnseenError or fit.UnseenReference
	By      []string      // segment columns (read along with the model's)
	Format  Format

	// Splice lets Parquet outputs copy the input's column chunks as bytes
	// (see Runner.Plan); false re-encodes every column.
	Splice bool
	// Compression is the Parquet codec; CompressionSet says it was asked
	// for (else spliced outputs take the input's codec).
	Compression    string
	CompressionSet bool
	// RowGroupRows is the re-encoded output's row-group size; RowGroupSet
	// says it was asked for, which rules out splicing.
	RowGroupRows int64
	RowGroupSet  bool
	// BatchRows is the rows per batch; unless BatchSet, wide reads get
	// fewer (BatchRowsFor).
	BatchRows int
	BatchSet  bool
	Workers   int

	// NeedOutcome: the accumulators or the predictions use the outcome, so
	// it is read when the table has it, and the outcome models are kept.
	NeedOutcome bool
	// RaiseMemoryLimit raises the process's soft memory limit to suit the
	// columns read (MemoryLimitFor), never lowering it.
	RaiseMemoryLimit bool

	Version string           // heft's version, for the output's metadata
	Alloc   memory.Allocator // nil = memory.DefaultAllocator
	Stdout  io.Writer        // where target Stdout writes; nil = os.Stdout
	// Logf reports what a run decided (why it re-encodes, what it wrote);
	// nil = silent.
	Logf func(format string, args ...any)
	// Progress returns the callback of one part's rows scored so far; nil =
	// none.
	Progress func() func(rows int64)
}

// Runner scores the parts of one run.
type Runner struct {
	m      *fit.Model
	scorer *score.Scorer
	opt    Options
	// toldWhy: a reason not to splice that holds for every input was logged.
	toldWhy bool
}

// New returns a Runner scoring with m through scorer (whose policy is
// resolved against m). Without NeedOutcome the scorer's outcome models are
// dropped: nothing would use their predictions.
func New(m *fit.Model, scorer *score.Scorer, opt Options) *Runner {
	if !opt.NeedOutcome {
		scorer = scorer.WithoutOutcome()
	}
	if opt.Alloc == nil {
		opt.Alloc = memory.DefaultAllocator
	}
	if opt.BatchRows <= 0 {
		opt.BatchRows = 65536
	}
	return &Runner{m: m, scorer: scorer, opt: opt}
}

func (r *Runner) logf(format string, args ...any) {
	if r.opt.Logf != nil {
		r.opt.Logf(format, args...)
	}
}

func (o *Options) stdout() io.Writer {
	if o.Stdout == nil {
		return os.Stdout
	}
	return o.Stdout
}
