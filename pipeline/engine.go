package pipeline

import (
	"context"
	"fmt"
	"runtime"
	"sync"

	"github.com/apache/arrow-go/v18/arrow"
)

// Sink receives batches in order. Write must not retain rec after returning
// unless it Retains it.
type Sink interface {
	Write(ctx context.Context, rec arrow.RecordBatch) error
}

// Committer is a sink whose Close is the commit point, like gzip.Writer:
// output appears at its target only when Close returns nil. Abort removes
// every temporary file and leaves the target untouched; it is idempotent and
// safe after Close.
type Committer interface {
	Sink
	Close() error
	Abort() error
}

// Transform turns one input batch into an output batch and a partial result.
// Each worker owns one Transform, so an implementation may keep scratch
// buffers without locking.
type Transform interface {
	// Apply processes one batch. out is the batch to write (released by the
	// engine after the sink's Write; may be nil for a diagnostics-only run);
	// partial is a per-batch result handed to fold in input order (may be
	// nil).
	Apply(ctx context.Context, rec arrow.RecordBatch, loc Location) (out arrow.RecordBatch, partial any, err error)
}

// EngineOptions tune Run.
type EngineOptions struct {
	Workers    int // 0 = runtime.GOMAXPROCS(0)
	QueueDepth int // batches in flight; 0 = 2*Workers
	// Progress is called from the ordered stage after each batch with the
	// number of input rows processed so far (cumulative). May be nil.
	Progress func(rows int64)
}

type job struct {
	seq int64
	rec arrow.RecordBatch
	loc Location
}

type result struct {
	seq     int64
	rows    int64
	out     arrow.RecordBatch
	partial any
	err     error
}

type sourceEnd struct {
	batches int64
	err     error
}

// Run reads src to the end, applies a Transform per worker (newTransform
// called once per worker), writes outputs to sink and calls fold with each
// partial, both strictly in input order, so output bytes and folded results
// do not depend on Workers. It returns the input rows processed.
//
// At most QueueDepth batches are alive at once, counting a batch from the
// moment the source hands it out until its output has been written, so
// memory is bounded by QueueDepth times the batch size whatever the table
// size. On the first error (from the source, a transform, the sink or fold)
// or ctx cancellation it stops every goroutine, releases every batch and
// returns that error; it returns only after all its goroutines have ended.
// sink and fold may be nil. Run does not close src or sink.
func Run(ctx context.Context, src Source, sink Sink, newTransform func() (Transform, error), fold func(partial any) error, opt EngineOptions) (int64, error) {
	workers := opt.Workers
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	depth := opt.QueueDepth
	if depth <= 0 {
		depth = 2 * workers
	}
	if depth < workers {
		depth = workers
	}
	transforms := make([]Transform, workers)
	for i := range transforms {
		t, err := newTransform()
		if err != nil {
			return 0, err
		}
		transforms[i] = t
	}

	ctx, cancel := context.WithCancel(ctx)
	defer cancel()

	// tokens bounds the batches in flight; jobs and results are as large as
	// the bound, so sends on them never block.
	tokens := make(chan struct{}, depth)
	jobs := make(chan job, depth)
	results := make(chan result, depth)
	srcDone := make(chan sourceEnd, 1)

	var wg sync.WaitGroup
	wg.Add(1)
	go func() {
		defer wg.Done()
		defer close(jobs)
		var seq int64
		for {
			select {
			case tokens <- struct{}{}:
			case <-ctx.Done():
				srcDone <- sourceEnd{seq, ctx.Err()}
				return
			}
			if !src.Next(ctx) {
				<-tokens
				err := src.Err()
				if err == nil {
					err = ctx.Err()
				}
				srcDone <- sourceEnd{seq, err}
				return
			}
			rec := src.RecordBatch()
			rec.Retain()
			jobs <- job{seq: seq, rec: rec, loc: src.Location()}
			seq++
		}
	}()

	for _, t := range transforms {
		wg.Add(1)
		go func(t Transform) {
			defer wg.Done()
			for {
				var j job
				var ok bool
				select {
				case <-ctx.Done():
					return
				case j, ok = <-jobs:
					if !ok {
						return
					}
				}
				results <- apply(ctx, t, j)
			}
		}(t)
	}

	var (
		rows    int64
		next    int64
		total   int64 = -1
		err     error
		pending = make(map[int64]result, depth)
	)
	for err == nil && (total < 0 || next < total) {
		select {
		case <-ctx.Done():
			err = ctx.Err()
		case end := <-srcDone:
			total = end.batches
			err = end.err
		case r := <-results:
			pending[r.seq] = r
			for {
				r, ok := pending[next]
				if !ok {
					break
				}
				delete(pending, next)
				next++
				err = deliver(ctx, r, sink, fold)
				<-tokens
				if err != nil {
					break
				}
				rows += r.rows
				if opt.Progress != nil {
					opt.Progress(rows)
				}
			}
		}
	}

	cancel()
	wg.Wait()
	// Everything still queued belongs to no goroutine now.
	for _, r := range pending {
		releaseResult(r)
	}
	for {
		select {
		case r := <-results:
			releaseResult(r)
		default:
			goto drained
		}
	}
drained:
	for j := range jobs {
		j.rec.Release()
	}
	return rows, err
}

// apply runs one Transform call, turning a panic into an error that names
// the batch, and releases the input.
func apply(ctx context.Context, t Transform, j job) (r result) {
	r = result{seq: j.seq, rows: j.rec.NumRows()}
	defer j.rec.Release()
	defer func() {
		if p := recover(); p != nil {
			if r.out != nil {
				r.out.Release()
				r.out = nil
			}
			r.err = &Error{File: j.loc.File, RowGroup: j.loc.RowGroup, Row: j.loc.Row, Err: fmt.Errorf("internal error in transform: %v", p)}
		}
	}()
	r.out, r.partial, r.err = t.Apply(ctx, j.rec, j.loc)
	if r.err != nil && r.out != nil {
		r.out.Release()
		r.out = nil
	}
	return r
}

// deliver writes one in-order result to the sink and folds its partial.
func deliver(ctx context.Context, r result, sink Sink, fold func(any) error) error {
	if r.err != nil {
		releaseResult(r)
		return r.err
	}
	if r.out != nil {
		var err error
		if sink != nil {
			err = sink.Write(ctx, r.out)
		}
		r.out.Release()
		if err != nil {
			return err
		}
	}
	if fold != nil {
		return fold(r.partial)
	}
	return nil
}

func releaseResult(r result) {
	if r.out != nil {
		r.out.Release()
	}
}
