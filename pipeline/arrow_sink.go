package pipeline

import (
	"context"
	"errors"
	"fmt"
	"io"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/ipc"
	"github.com/apache/arrow-go/v18/arrow/memory"
)

// ArrowSinkOptions configure the Arrow IPC sinks.
type ArrowSinkOptions struct {
	Alloc    memory.Allocator
	Metadata arrow.Metadata // schema-level metadata of the output (replaces the schema's own)
}

// ipcWriter is what the IPC file and stream writers share.
type ipcWriter interface {
	Write(rec arrow.RecordBatch) error
	Close() error
}

type arrowSink struct {
	name   string
	w      ipcWriter
	atomic *AtomicFile
	err    error
	closed bool
}

func ipcOptions(schema *arrow.Schema, opt ArrowSinkOptions) []ipc.Option {
	mem := opt.Alloc
	if mem == nil {
		mem = memory.DefaultAllocator
	}
	md := opt.Metadata
	return []ipc.Option{ipc.WithSchema(arrow.NewSchema(schema.Fields(), &md)), ipc.WithAllocator(mem)}
}

// NewArrowFileSink writes an Arrow IPC file that appears at target only when
// Close returns nil.
func NewArrowFileSink(target string, schema *arrow.Schema, opt ArrowSinkOptions) (Committer, error) {
	af, err := CreateAtomic(target)
	if err != nil {
		return nil, err
	}
	w, err := ipc.NewFileWriter(af, ipcOptions(schema, opt)...)
	if err != nil {
		af.Abort()
		return nil, At(target, fmt.Errorf("start Arrow file: %w", err))
	}
	return &arrowSink{name: target, w: w, atomic: af}, nil
}

// NewArrowStreamSink writes an Arrow IPC stream to w (standard output, say).
// Close writes the end-of-stream marker but does not close w; Abort is a
// no-op.
func NewArrowStreamSink(w io.Writer, schema *arrow.Schema, opt ArrowSinkOptions) (Committer, error) {
	return &arrowSink{name: "<stream>", w: ipc.NewWriter(noClose{w}, ipcOptions(schema, opt)...)}, nil
}

func (s *arrowSink) Write(ctx context.Context, rec arrow.RecordBatch) error {
	if s.err != nil {
		return s.err
	}
	if s.closed {
		return At(s.name, errors.New("write after close"))
	}
	if err := ctx.Err(); err != nil {
		return err
	}
	if err := s.w.Write(rec); err != nil {
		s.err = At(s.name, fmt.Errorf("write Arrow: %w", err))
	}
	return s.err
}

func (s *arrowSink) Close() error {
	if s.closed {
		return s.err
	}
	s.closed = true
	if err := s.w.Close(); err != nil && s.err == nil {
		s.err = At(s.name, fmt.Errorf("finish Arrow: %w", err))
	}
	s.err = finishAtomic(s.atomic, s.err)
	return s.err
}

func (s *arrowSink) Abort() error {
	if !s.closed {
		s.closed = true
		if s.err == nil {
			s.err = At(s.name, errors.New("aborted"))
		}
	}
	if s.atomic != nil {
		return s.atomic.Abort()
	}
	return nil
}
