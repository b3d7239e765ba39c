package pipeline

import (
	"context"
	"encoding/binary"
	"errors"
	"fmt"
	"os"
	"path/filepath"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/memory"
	"github.com/apache/arrow-go/v18/parquet"
	"github.com/apache/arrow-go/v18/parquet/file"
	"github.com/apache/arrow-go/v18/parquet/pqarrow"
	"github.com/parquet-go/parquet-go/format"
)

// DefaultSpillRows is the row group size above which a splice sink writes
// the appended columns to temporary files as it encodes them, rather than
// holding a row group's encoded columns in memory (SpliceOptions.SpillRows).
const DefaultSpillRows = 1 << 20

// encoded is a small Parquet file of one row group holding appended
// columns: in memory (b) or in a temporary file (f, size bytes).
type encoded struct {
	meta *format.FileMetaData
	b    []byte
	f    *os.File
}

// read returns n bytes at off.
func (e *encoded) read(off, n int64) ([]byte, error) {
	if e.f == nil {
		if off < 0 || n < 0 || off+n > int64(len(e.b)) {
			return nil, fmt.Errorf("appended columns: %d+%d outside the encoder's output", off, n)
		}
		return e.b[off : off+n], nil
	}
	b := make([]byte, n)
	if _, err := e.f.ReadAt(b, off); err != nil {
		return nil, fmt.Errorf("appended columns: read back: %w", err)
	}
	return b, nil
}

// copyTo appends n bytes at off to af.
func (e *encoded) copyTo(af *AtomicFile, off, n int64) error {
	if e.f == nil {
		b, err := e.read(off, n)
		if err != nil {
			return err
		}
		_, err = af.Write(b)
		return err
	}
	return af.CopyFrom(e.f, off, n)
}

// columnSpill encodes one appended column of one row group straight to a
// temporary file beside the output: a serial row group writer hands each
// page to the file as it fills (no dictionary, whose page would have to come
// first), so memory is a page whatever the row group's size.
type columnSpill struct {
	f     *os.File
	fw    *file.Writer
	rgw   file.SerialRowGroupWriter
	cw    file.ColumnChunkWriter
	field arrow.Field
	ctx   context.Context
	def   []int16
	size  int64
}

// countingWriter counts what reaches the file, and hides its Close from the
// Parquet writer, which closes its sink.
type countingWriter struct {
	f *os.File
	n *int64
}

func (w countingWriter) Write(p []byte) (int, error) {
	n, err := w.f.Write(p)
	*w.n += int64(n)
	return n, err
}

func newColumnSpill(target string, field arrow.Field, codec string, pageIndex bool, createdBy string, mem memory.Allocator) (*columnSpill, error) {
	c, err := parseCompression(codec)
	if err != nil {
		return nil, err
	}
	dir, base := filepath.Split(target)
	if dir == "" {
		dir = "."
	}
	f, err := createTemp(dir, base)
	if err != nil {
		return nil, At(target, fmt.Errorf("create temporary file for appended columns: %w", err))
	}
	s := &columnSpill{f: f, field: field}
	props := []parquet.WriterProperty{
		parquet.WithAllocator(mem), parquet.WithCompression(c), parquet.WithDictionaryDefault(false),
		parquet.WithStats(true), parquet.WithPageIndexEnabled(pageIndex),
	}
	if createdBy != "" {
		props = append(props, parquet.WithCreatedBy(createdBy))
	}
	wp := parquet.NewWriterProperties(props...)
	ap := pqarrow.NewArrowWriterProperties(pqarrow.WithAllocator(mem))
	err = func() error {
		sc, err := pqarrow.ToParquet(arrow.NewSchema([]arrow.Field{field}, nil), wp, ap)
		if err != nil {
			return err
		}
		if s.fw, err = file.NewParquetWriterWithError(countingWriter{f, &s.size}, sc.Root(), file.WithWriterProps(wp)); err != nil {
			return err
		}
		s.rgw = s.fw.AppendRowGroup()
		s.cw, err = s.rgw.NextColumn()
		return err
	}()
	if err != nil {
		s.remove()
		return nil, At(target, fmt.Errorf("appended column %q: %w", field.Name, err))
	}
	s.ctx = pqarrow.NewArrowWriteContext(context.Background(), &ap)
	return s, nil
}

func (s *columnSpill) write(arr arrow.Array) (err error) {
	defer func() {
		if p := recover(); p != nil {
			err = fmt.Errorf("internal error in Parquet encoder: %v", p)
		}
	}()
	var def []int16
	if s.field.Nullable {
		if cap(s.def) < arr.Len() {
			s.def = make([]int16, arr.Len())
		}
		def = s.def[:arr.Len()]
		for i := range def {
			def[i] = 0
			if arr.IsValid(i) {
				def[i] = 1
			}
		}
	}
	return pqarrow.WriteArrowToColumn(s.ctx, s.cw, arr, def, nil, s.field.Nullable)
}

// finish closes the column, the row group and the file and returns the
// file's footer with the file.
func (s *columnSpill) finish() (*encoded, error) {
	if err := errors.Join(s.cw.Close(), s.rgw.Close(), s.fw.Close()); err != nil {
		return nil, fmt.Errorf("appended column %q: %w", s.field.Name, err)
	}
	var tail [8]byte
	if s.size < 12 {
		return nil, fmt.Errorf("appended column %q: the encoder wrote %d bytes", s.field.Name, s.size)
	}
	if _, err := s.f.ReadAt(tail[:], s.size-8); err != nil {
		return nil, err
	}
	n := int64(binary.LittleEndian.Uint32(tail[:4]))
	if n > s.size-12 {
		return nil, fmt.Errorf("appended column %q: the encoder wrote no footer", s.field.Name)
	}
	b := make([]byte, n+8) // the footer and the tail just read, for parseFooter
	if _, err := s.f.ReadAt(b, s.size-8-n); err != nil {
		return nil, err
	}
	m, err := parseFooter(b)
	if err != nil {
		return nil, fmt.Errorf("appended column %q: %w", s.field.Name, err)
	}
	return &encoded{meta: m, f: s.f}, nil
}

// remove closes and deletes the temporary file.
func (s *columnSpill) remove() {
	if s.f != nil {
		s.f.Close()
		os.Remove(s.f.Name())
		s.f = nil
	}
}
