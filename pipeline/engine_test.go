package pipeline

import (
	"context"
	"errors"
	"math/rand/v2"
	"reflect"
	"runtime"
	"testing"
	"time"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"
)

// sliceSource hands out batches of an int64 column "x" holding 0, 1, 2, ...
type sliceSource struct {
	mem     memory.Allocator
	schema  *arrow.Schema
	sizes   []int
	i       int
	row     int64
	cur     arrow.RecordBatch
	failAt  int // batch index whose Next fails; -1 never
	err     error
	blockAt int // batch index whose Next waits for ctx; -1 never
}

var errSource = errors.New("source broke")

func newSliceSource(mem memory.Allocator, sizes ...int) *sliceSource {
	return &sliceSource{
		mem:     mem,
		schema:  arrow.NewSchema([]arrow.Field{{Name: "x", Type: arrow.PrimitiveTypes.Int64}}, nil),
		sizes:   sizes,
		failAt:  -1,
		blockAt: -1,
	}
}

func (s *sliceSource) Schema() *arrow.Schema { return s.schema }

func (s *sliceSource) Next(ctx context.Context) bool {
	if s.cur != nil {
		s.row += s.cur.NumRows()
		s.cur.Release()
		s.cur = nil
	}
	if s.i == s.blockAt {
		<-ctx.Done()
		s.err = ctx.Err()
		return false
	}
	if s.i == s.failAt {
		s.err = &Error{File: "in.parquet", RowGroup: -1, Row: s.row, Err: errSource}
		return false
	}
	if s.i >= len(s.sizes) {
		return false
	}
	b := array.NewInt64Builder(s.mem)
	defer b.Release()
	for k := 0; k < s.sizes[s.i]; k++ {
		b.Append(s.row + int64(k))
	}
	col := b.NewArray()
	defer col.Release()
	s.cur = array.NewRecordBatch(s.schema, []arrow.Array{col}, int64(s.sizes[s.i]))
	s.i++
	return true
}

func (s *sliceSource) RecordBatch() arrow.RecordBatch { return s.cur }
func (s *sliceSource) Location() Location {
	return Location{File: "in.parquet", RowGroup: -1, Row: s.row}
}
func (s *sliceSource) Err() error { return s.err }
func (s *sliceSource) Close() error {
	if s.cur != nil {
		s.cur.Release()
		s.cur = nil
	}
	return nil
}

// doubler writes 2x and returns the batch's first row as its partial, after a
// random delay so that workers finish out of order.
type doubler struct {
	mem     memory.Allocator
	rng     *rand.Rand
	failAt  int64 // Location.Row that fails; -1 never
	panicAt int64
}

var errTransform = errors.New("transform broke")

func (d *doubler) Apply(ctx context.Context, rec arrow.RecordBatch, loc Location) (arrow.RecordBatch, any, error) {
	time.Sleep(time.Duration(d.rng.IntN(300)) * time.Microsecond)
	if loc.Row == d.failAt {
		return nil, nil, errTransform
	}
	if loc.Row == d.panicAt {
		panic("boom")
	}
	in := rec.Column(0).(*array.Int64)
	b := array.NewInt64Builder(d.mem)
	defer b.Release()
	for i := 0; i < in.Len(); i++ {
		b.Append(2 * in.Value(i))
	}
	col := b.NewArray()
	defer col.Release()
	out := array.NewRecordBatch(rec.Schema(), []arrow.Array{col}, rec.NumRows())
	return out, loc.Row, nil
}

type collectSink struct {
	vals   []int64
	failAt int // write index that fails; -1 never
	n      int
}

var errSink = errors.New("sink broke")

func (c *collectSink) Write(ctx context.Context, rec arrow.RecordBatch) error {
	if c.n == c.failAt {
		return errSink
	}
	c.n++
	col := rec.Column(0).(*array.Int64)
	c.vals = append(c.vals, col.Int64Values()...)
	return nil
}

func TestRunOrderedAcrossWorkers(t *testing.T) {
	sizes := []int{7, 1, 30, 2, 2, 50, 9, 3, 1, 17, 4, 8, 12, 6, 5, 40}
	var want []int64
	var wantFold []any
	var row int64
	for _, n := range sizes {
		wantFold = append(wantFold, row)
		for k := 0; k < n; k++ {
			want = append(want, 2*(row+int64(k)))
		}
		row += int64(n)
	}
	for _, tc := range []struct{ workers, depth int }{{1, 0}, {2, 0}, {4, 0}, {4, 4}, {3, 1}} {
		mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
		src := newSliceSource(mem, sizes...)
		sink := &collectSink{failAt: -1}
		var folded []any
		var progress []int64
		seed := uint64(tc.workers)
		rows, err := Run(context.Background(), src, sink, func() (Transform, error) {
			seed++
			return &doubler{mem: mem, rng: rand.New(rand.NewPCG(seed, 1)), failAt: -1, panicAt: -1}, nil
		}, func(p any) error {
			folded = append(folded, p)
			return nil
		}, EngineOptions{Workers: tc.workers, QueueDepth: tc.depth, Progress: func(r int64) { progress = append(progress, r) }})
		src.Close()
		if err != nil {
			t.Fatalf("workers %d: %v", tc.workers, err)
		}
		if rows != row {
			t.Errorf("workers %d: rows %d, want %d", tc.workers, rows, row)
		}
		if !reflect.DeepEqual(sink.vals, want) {
			t.Errorf("workers %d: output out of order", tc.workers)
		}
		if !reflect.DeepEqual(folded, wantFold) {
			t.Errorf("workers %d: fold order %v, want %v", tc.workers, folded, wantFold)
		}
		if len(progress) != len(sizes) || progress[len(progress)-1] != row {
			t.Errorf("workers %d: progress %v", tc.workers, progress)
		}
		mem.AssertSize(t, 0)
	}
}

func TestRunStopsOnFirstError(t *testing.T) {
	sizes := make([]int, 200)
	for i := range sizes {
		sizes[i] = 10
	}
	cases := []struct {
		name      string
		srcFail   int
		xformFail int64
		xformPan  int64
		sinkFail  int
		foldFail  int
		want      error
	}{
		{name: "source", srcFail: 37, xformFail: -1, xformPan: -1, sinkFail: -1, foldFail: -1, want: errSource},
		{name: "transform", srcFail: -1, xformFail: 450, xformPan: -1, sinkFail: -1, foldFail: -1, want: errTransform},
		{name: "sink", srcFail: -1, xformFail: -1, xformPan: -1, sinkFail: 20, foldFail: -1, want: errSink},
		{name: "fold", srcFail: -1, xformFail: -1, xformPan: -1, sinkFail: -1, foldFail: 60, want: errFold},
		{name: "panic", srcFail: -1, xformFail: -1, xformPan: 990, sinkFail: -1, foldFail: -1},
	}
	for _, tc := range cases {
		for _, workers := range []int{1, 3} {
			before := runtime.NumGoroutine()
			mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
			src := newSliceSource(mem, sizes...)
			src.failAt = tc.srcFail
			sink := &collectSink{failAt: tc.sinkFail}
			nfold := 0
			var seed uint64
			_, err := Run(context.Background(), src, sink, func() (Transform, error) {
				seed++
				return &doubler{mem: mem, rng: rand.New(rand.NewPCG(seed, 2)), failAt: tc.xformFail, panicAt: tc.xformPan}, nil
			}, func(any) error {
				if nfold == tc.foldFail {
					return errFold
				}
				nfold++
				return nil
			}, EngineOptions{Workers: workers})
			src.Close()
			if tc.want != nil && !errors.Is(err, tc.want) {
				t.Errorf("%s/%d: err %v, want %v", tc.name, workers, err, tc.want)
			}
			if tc.want == nil {
				var pe *Error
				if !errors.As(err, &pe) || pe.Row != tc.xformPan {
					t.Errorf("%s/%d: err %v, want a located *Error", tc.name, workers, err)
				}
			}
			checkNoLeak(t, before)
			mem.AssertSize(t, 0)
		}
	}
}

var errFold = errors.New("fold broke")

func TestRunCancel(t *testing.T) {
	before := runtime.NumGoroutine()
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	src := newSliceSource(mem, 5, 5, 5, 5, 5)
	src.blockAt = 3
	ctx, cancel := context.WithCancel(context.Background())
	time.AfterFunc(20*time.Millisecond, cancel)
	_, err := Run(ctx, src, &collectSink{failAt: -1}, func() (Transform, error) {
		return &doubler{mem: mem, rng: rand.New(rand.NewPCG(1, 1)), failAt: -1, panicAt: -1}, nil
	}, nil, EngineOptions{Workers: 2})
	src.Close()
	if !errors.Is(err, context.Canceled) {
		t.Fatalf("err %v, want context.Canceled", err)
	}
	checkNoLeak(t, before)
	mem.AssertSize(t, 0)
}

func TestRunNilOutputAndNilSink(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	src := newSliceSource(mem, 3, 4)
	rows, err := Run(context.Background(), src, nil, func() (Transform, error) {
		return nilTransform{}, nil
	}, nil, EngineOptions{})
	src.Close()
	if err != nil || rows != 7 {
		t.Fatalf("rows %d err %v", rows, err)
	}
	mem.AssertSize(t, 0)
}

type nilTransform struct{}

func (nilTransform) Apply(context.Context, arrow.RecordBatch, Location) (arrow.RecordBatch, any, error) {
	return nil, nil, nil
}

func checkNoLeak(t *testing.T, before int) {
	t.Helper()
	deadline := time.Now().Add(time.Second)
	for runtime.NumGoroutine() > before {
		if time.Now().After(deadline) {
			buf := make([]byte, 1<<16)
			t.Fatalf("goroutines: %d before, %d after\n%s", before, runtime.NumGoroutine(), buf[:runtime.Stack(buf, true)])
		}
		time.Sleep(5 * time.Millisecond)
	}
}
