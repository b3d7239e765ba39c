package pipeline

import (
	"bufio"
	"bytes"
	"context"
	"encoding/binary"
	"fmt"
	"io"
	"os"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/ipc"
)

// ipcBatches is the part that differs between the Arrow IPC file and stream
// readers: each hands out stored record batches, owned by the reader.
type ipcBatches interface {
	next() (arrow.RecordBatch, bool, error) // the batch is owned by the reader
	close() error
}

// arrowSource reads an Arrow IPC file or stream. Stored batches longer than
// BatchRows are cut into zero-copy slices; shorter ones pass as they are.
// Row groups do not exist here, so Location().RowGroup is -1.
type arrowSource struct {
	path   string
	in     ipcBatches
	batch  int64
	idx    []int // projected columns
	schema *arrow.Schema
	meta   arrow.Metadata

	stored  arrow.RecordBatch // current stored batch, owned by the reader
	nstored int               // stored batches seen
	off     int64             // rows of stored already handed out
	row     int64             // file row of stored's first row

	cur arrow.RecordBatch
	loc Location
	err error
}

func newArrowSource(path string, in ipcBatches, full *arrow.Schema, p *projection, opt SourceOptions) (*arrowSource, error) {
	idx, err := p.resolve(full)
	if err != nil {
		return nil, err
	}
	meta := full.Metadata()
	return &arrowSource{
		path: path, in: in, batch: opt.batchRows(), idx: idx,
		schema: projectSchema(full, idx, meta), meta: meta, row: 0, loc: Location{File: path, RowGroup: -1},
	}, nil
}

func (s *arrowSource) Schema() *arrow.Schema          { return s.schema }
func (s *arrowSource) RecordBatch() arrow.RecordBatch { return s.cur }
func (s *arrowSource) Location() Location             { return s.loc }
func (s *arrowSource) Err() error                     { return s.err }
func (s *arrowSource) Metadata() arrow.Metadata       { return s.meta }

func (s *arrowSource) Next(ctx context.Context) bool {
	s.release()
	if s.err != nil {
		return false
	}
	if err := ctx.Err(); err != nil {
		s.err = At(s.path, err)
		return false
	}
	for s.stored == nil || s.off >= s.stored.NumRows() {
		if s.stored != nil {
			s.row += s.stored.NumRows()
		}
		s.stored, s.off = nil, 0
		var (
			rec arrow.RecordBatch
			ok  bool
		)
		err := guard(s.path, func() (err error) {
			rec, ok, err = s.in.next()
			return err
		})
		if err != nil {
			s.err = s.errAt(fmt.Errorf("record batch %d: %w", s.nstored, unwrapAt(err, s.path)))
			return false
		}
		if !ok {
			return false
		}
		s.nstored++
		s.stored = rec
	}
	n := min(s.batch, s.stored.NumRows()-s.off)
	cols := make([]arrow.Array, len(s.idx))
	err := guard(s.path, func() error {
		for i, j := range s.idx {
			if int64(j) >= s.stored.NumCols() {
				return fmt.Errorf("%w: record batch has %d columns", ErrMalformed, s.stored.NumCols())
			}
			c := s.stored.Column(j)
			if s.off == 0 && n == int64(c.Len()) {
				c.Retain()
				cols[i] = c
			} else {
				cols[i] = array.NewSlice(c, s.off, s.off+n)
			}
		}
		return nil
	})
	if err != nil {
		for _, c := range cols {
			if c != nil {
				c.Release()
			}
		}
		s.err = s.errAt(fmt.Errorf("record batch %d: %w", s.nstored-1, unwrapAt(err, s.path)))
		return false
	}
	s.cur = array.NewRecordBatch(s.schema, cols, n)
	for _, c := range cols {
		c.Release()
	}
	s.loc = Location{File: s.path, RowGroup: -1, Row: s.row + s.off}
	s.off += n
	return true
}

func (s *arrowSource) errAt(err error) error {
	return &Error{File: s.path, RowGroup: -1, Row: -1, Err: err}
}

func (s *arrowSource) release() {
	if s.cur != nil {
		s.cur.Release()
		s.cur = nil
	}
}

func (s *arrowSource) Close() error {
	s.release()
	s.stored = nil
	if s.in == nil {
		return nil
	}
	in := s.in
	s.in = nil
	return guard(s.path, in.close)
}

// ipcFile reads the record batches of an Arrow IPC file in order.
type ipcFile struct {
	f *os.File
	r *ipc.FileReader
	i int
}

func (x *ipcFile) next() (arrow.RecordBatch, bool, error) {
	if x.i >= x.r.NumRecords() {
		return nil, false, nil
	}
	rec, err := x.r.RecordBatch(x.i)
	if err != nil {
		return nil, false, err
	}
	x.i++
	return rec, true, nil
}

func (x *ipcFile) close() error {
	err := x.r.Close()
	if cerr := x.f.Close(); err == nil {
		err = cerr
	}
	return err
}

func openArrowFile(path string, p *projection, opt SourceOptions) (Source, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, locate(err, path, -1, "")
	}
	var r *ipc.FileReader
	err = guard(path, func() (err error) {
		if err := checkIPCFooter(f); err != nil {
			return err
		}
		r, err = ipc.NewFileReader(f, ipc.WithAllocator(opt.alloc()))
		return err
	})
	if err != nil {
		f.Close()
		return nil, err
	}
	in := &ipcFile{f: f, r: r}
	s, err := newArrowSource(path, in, r.Schema(), p, opt)
	if err != nil {
		guard(path, in.close)
		return nil, err
	}
	return s, nil
}

// Standard input has no size to bound IPC messages by, so these do: real
// metadata flatbuffers are kilobytes, and a record batch body over 4 GiB
// should be sent as several batches.
const (
	maxStdinMetadata = 1 << 28
	maxStdinBody     = 1 << 32
)

// checkIPCFooter checks the schema in an IPC file's footer before
// ipc.NewFileReader decodes it (see checkSchemaFlatbuffer). A file without
// a plausible footer is left for the reader to reject.
func checkIPCFooter(f *os.File) error {
	info, err := f.Stat()
	if err != nil {
		return err
	}
	const tail = 10 // int32 footer length, then "ARROW1"
	size := info.Size()
	if size < tail+8 {
		return nil
	}
	var end [tail]byte
	if _, err := f.ReadAt(end[:], size-tail); err != nil {
		return err
	}
	n := int64(binary.LittleEndian.Uint32(end[:4]))
	if string(end[4:]) != "ARROW1" || n <= 0 || n > size-tail-8 {
		return nil
	}
	footer := make([]byte, n)
	if _, err := f.ReadAt(footer, size-tail-n); err != nil {
		return err
	}
	return checkSchemaFlatbuffer(footer, true)
}

// checkIPCStreamSchema reads the first message of an IPC stream, which must
// be its schema, checks it (see checkSchemaFlatbuffer) and returns a reader
// that yields the whole stream again. Messages longer than limit are
// refused. A stream too short to frame a message is left for the reader.
func checkIPCStreamSchema(r io.Reader, limit int64) (io.Reader, error) {
	br := bufio.NewReader(r)
	head, err := br.Peek(8)
	if err != nil {
		return br, nil
	}
	prefix, n := 8, int64(int32(binary.LittleEndian.Uint32(head[4:])))
	if binary.LittleEndian.Uint32(head) != 0xFFFFFFFF { // before format 0.15
		prefix, n = 4, int64(int32(binary.LittleEndian.Uint32(head)))
	}
	if n < 0 || n > limit {
		return nil, fmt.Errorf("%w: Arrow IPC schema message claims %d bytes", ErrMalformed, n)
	}
	msg := make([]byte, int64(prefix)+n)
	if _, err := io.ReadFull(br, msg); err != nil {
		return nil, fmt.Errorf("%w: Arrow IPC schema message cut short: %w", ErrMalformed, err)
	}
	if err := checkIPCMessage(msg); err != nil {
		return nil, err
	}
	return io.MultiReader(bytes.NewReader(msg), br), nil
}

// ipcStream reads the record batches of an Arrow IPC stream.
type ipcStream struct {
	r *ipc.Reader
	c io.Closer // the file, or nil for standard input
}

func (x *ipcStream) next() (arrow.RecordBatch, bool, error) {
	if x.r.Next() {
		return x.r.RecordBatch(), true, nil
	}
	return nil, false, x.r.Err()
}

func (x *ipcStream) close() error {
	x.r.Release()
	if x.c != nil {
		return x.c.Close()
	}
	return nil
}

func openArrowStream(path string, p *projection, opt SourceOptions) (Source, error) {
	var (
		rd    io.Reader
		c     io.Closer
		opts  = []ipc.Option{ipc.WithAllocator(opt.alloc())}
		limit = int64(maxStdinMetadata)
	)
	if path == Stdin {
		rd = opt.stdin()
		opts = append(opts, ipc.WithMetadataSizeLimit(maxStdinMetadata), ipc.WithBodySizeLimit(maxStdinBody))
	} else {
		f, err := os.Open(path)
		if err != nil {
			return nil, locate(err, path, -1, "")
		}
		rd, c = f, f
		// No message can be longer than the file: this keeps a damaged
		// length from allocating gigabytes before the read fails.
		if info, err := f.Stat(); err == nil {
			limit = info.Size()
			opts = append(opts, ipc.WithMetadataSizeLimit(limit), ipc.WithBodySizeLimit(limit))
		}
	}
	var r *ipc.Reader
	err := guard(path, func() (err error) {
		if rd, err = checkIPCStreamSchema(rd, limit); err != nil {
			return err
		}
		// ipc.NewReader ignores the size limits; its message reader does not.
		r, err = ipc.NewReaderFromMessageReader(ipc.NewMessageReader(rd, opts...), opts...)
		return err
	})
	if err != nil {
		if c != nil {
			c.Close()
		}
		return nil, err
	}
	in := &ipcStream{r: r, c: c}
	s, err := newArrowSource(path, in, r.Schema(), p, opt)
	if err != nil {
		guard(path, in.close)
		return nil, err
	}
	return s, nil
}
