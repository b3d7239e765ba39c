package pipeline

import (
	"bytes"
	"cmp"
	"encoding/binary"
	"fmt"
	"io"
	"slices"
)

// footerTail stands between arrow-go's file writer and the output. Until
// capture is set it passes writes through; after, it keeps them, so that
// flush can put the footer in canonical form before it reaches the file.
//
// The reason: arrow-go lists a column chunk's page encoding statistics by
// ranging over a Go map, so when a dictionary column falls back to plain
// pages (two data page encodings in one chunk) their order, and with it the
// file's bytes, changes from run to run. heft promises that output bytes
// are a function of input, model and options.
type footerTail struct {
	w       io.Writer
	capture bool
	buf     bytes.Buffer
}

func (t *footerTail) Write(p []byte) (int, error) {
	if t.capture {
		return t.buf.Write(p)
	}
	return t.w.Write(p)
}

// flush writes what Close wrote (page indexes, bloom filters, the footer)
// with the footer's encoding statistics sorted.
func (t *footerTail) flush() error {
	b, err := canonicalFooter(t.buf.Bytes())
	if err != nil {
		return err
	}
	_, err = t.w.Write(b)
	t.buf.Reset()
	return err
}

// canonicalFooter returns tail, the end of a Parquet file that holds its
// whole footer, with every column chunk's page encoding statistics sorted
// by page type and encoding. Only those lists are reordered; every other
// byte of the footer is kept (see thrift_raw.go), and a footer that is
// already in order comes back as it was.
func canonicalFooter(tail []byte) ([]byte, error) {
	b, err := footerOf(tail)
	if err != nil {
		return nil, fmt.Errorf("footer written at close: %w", err)
	}
	start := len(tail) - 8 - len(b)
	if err := checkThriftSizes(b); err != nil {
		return nil, fmt.Errorf("footer: %w", err)
	}
	changed := false
	// FileMetaData 4 row_groups → RowGroup 1 columns → ColumnChunk 3
	// meta_data → ColumnMetaData 13 encoding_stats (parquet.thrift).
	listOf := func(w *rawWriter, f rawField, each func(pos int) ([]byte, error)) error {
		et, els, err := rawList(b, f.start)
		if err != nil {
			return err
		}
		out := make([][]byte, len(els))
		for i, e := range els {
			if out[i], err = each(e[0]); err != nil {
				return err
			}
		}
		w.list(f.id, et, out)
		return nil
	}
	into := func(id int16, inner func(w *rawWriter, f rawField) (bool, error)) func(w *rawWriter, f rawField) (bool, error) {
		return func(w *rawWriter, f rawField) (bool, error) {
			if f.id != id {
				return false, nil
			}
			return inner(w, f)
		}
	}
	sortStats := func(w *rawWriter, f rawField) (bool, error) {
		et, els, err := rawList(b, f.start)
		if err != nil {
			return false, err
		}
		type stat struct {
			pageType, encoding int64
			bytes              []byte
		}
		st := make([]stat, len(els))
		for i, e := range els {
			fields, _, err := rawStruct(b, e[0])
			if err != nil {
				return false, err
			}
			st[i].bytes = b[e[0]:e[1]]
			if f, ok := fieldOf(fields, 1); ok {
				st[i].pageType, _ = rawI64(b, f)
			}
			if f, ok := fieldOf(fields, 2); ok {
				st[i].encoding, _ = rawI64(b, f)
			}
		}
		sorted := slices.IsSortedFunc(st, func(x, y stat) int {
			return cmp.Or(cmp.Compare(x.pageType, y.pageType), cmp.Compare(x.encoding, y.encoding))
		})
		if sorted {
			return false, nil
		}
		changed = true
		slices.SortStableFunc(st, func(x, y stat) int {
			return cmp.Or(cmp.Compare(x.pageType, y.pageType), cmp.Compare(x.encoding, y.encoding))
		})
		out := make([][]byte, len(st))
		for i := range st {
			out[i] = st[i].bytes
		}
		w.list(f.id, et, out)
		return true, nil
	}
	chunk := func(pos int) ([]byte, error) {
		return rewriteStruct(b, pos, into(3, func(w *rawWriter, f rawField) (bool, error) {
			v, err := rewriteStruct(b, f.start, into(13, sortStats), nil)
			if err != nil {
				return false, err
			}
			w.raw(f.id, f.typ, v)
			return true, nil
		}), nil)
	}
	rowGroup := func(pos int) ([]byte, error) {
		return rewriteStruct(b, pos, into(1, func(w *rawWriter, f rawField) (bool, error) {
			return true, listOf(w, f, chunk)
		}), nil)
	}
	footer, err := rewriteStruct(b, 0, into(4, func(w *rawWriter, f rawField) (bool, error) {
		return true, listOf(w, f, rowGroup)
	}), nil)
	if err != nil {
		return nil, fmt.Errorf("footer: %w", err)
	}
	if !changed {
		return tail, nil
	}
	out := append(slices.Clone(tail[:start]), footer...)
	out = binary.LittleEndian.AppendUint32(out, uint32(len(footer)))
	return append(out, "PAR1"...), nil
}
