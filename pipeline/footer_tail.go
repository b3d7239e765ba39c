package pipeline

import (
	"bytes"
	"cmp"
	"encoding/binary"
	"fmt"
	"io"
	"slices"

	"github.com/parquet-go/parquet-go/encoding/thrift"
	"github.com/parquet-go/parquet-go/format"
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
// by page type and encoding. A footer whose order cannot vary (no chunk
// has two statistics of one page type) is returned as it is; otherwise the
// footer is re-encoded, so the choice depends only on the file's content.
func canonicalFooter(tail []byte) ([]byte, error) {
	if len(tail) < 8 || string(tail[len(tail)-4:]) != "PAR1" {
		return nil, fmt.Errorf("footer: the writer did not end the file with PAR1")
	}
	n := int(binary.LittleEndian.Uint32(tail[len(tail)-8:]))
	if n > len(tail)-8 {
		return nil, fmt.Errorf("footer: %d bytes long, more than the %d written at close", n, len(tail)-8)
	}
	start := len(tail) - 8 - n
	var m format.FileMetaData
	if err := checkThriftSizes(tail[start : start+n]); err != nil {
		return nil, fmt.Errorf("footer: %w", err)
	}
	if err := thrift.Unmarshal(&thriftCompact, tail[start:start+n], &m); err != nil {
		return nil, fmt.Errorf("footer: %w", err)
	}
	if !sortEncodingStats(&m) {
		return tail, nil
	}
	footer, err := thrift.Marshal(&thriftCompact, &m)
	if err != nil {
		return nil, fmt.Errorf("footer: %w", err)
	}
	out := append(slices.Clone(tail[:start]), footer...)
	out = binary.LittleEndian.AppendUint32(out, uint32(len(footer)))
	return append(out, "PAR1"...), nil
}

// sortEncodingStats sorts every chunk's page encoding statistics and
// reports whether any chunk's order could have varied.
func sortEncodingStats(m *format.FileMetaData) bool {
	varied := false
	for i := range m.RowGroups {
		for j := range m.RowGroups[i].Columns {
			st := m.RowGroups[i].Columns[j].MetaData.EncodingStats
			for a := range st {
				for b := a + 1; b < len(st); b++ {
					if st[a].PageType == st[b].PageType {
						varied = true
					}
				}
			}
			slices.SortFunc(st, func(x, y format.PageEncodingStats) int {
				return cmp.Or(cmp.Compare(x.PageType, y.PageType), cmp.Compare(x.Encoding, y.Encoding))
			})
		}
	}
	return varied
}
