package pipeline

import (
	"encoding/binary"
	"errors"
	"fmt"
)

// Raw Thrift compact-protocol structs, for rewriting a Parquet footer
// without decoding it into structures that lose information. parquet-go's
// format structs cannot tell an absent field from a zero one (its
// Statistics and null_count are always written, so a chunk written without
// statistics would come out claiming no nulls, and predicate push-down
// would skip row groups it must read), and they drop fields they do not
// know. The splice footer therefore copies every field of the input's
// structs byte for byte and re-encodes only the offsets it moves.

// rawField is one field of a struct: its id, compact type and the bytes of
// its value in the buffer it was read from (a boolean's value is its type).
type rawField struct {
	id         int16
	typ        byte
	start, end int
}

// rawStruct reads the fields of the struct at b[pos:] and returns them and
// the offset just past its stop byte. The bytes must have passed
// checkThriftSizes.
func rawStruct(b []byte, pos int) ([]rawField, int, error) {
	c := thriftChecker{b: b, pos: pos}
	var fields []rawField
	var last int16
	for {
		h, err := c.byte1()
		if err != nil {
			return nil, 0, err
		}
		t := h & 0x0f
		if t == 0 {
			return fields, c.pos, nil
		}
		id := last + int16(h>>4)
		if h>>4 == 0 {
			v, err := c.varint()
			if err != nil {
				return nil, 0, err
			}
			id = int16(zigzag(v))
		}
		start := c.pos
		if err := c.value(t, 1); err != nil {
			return nil, 0, err
		}
		fields = append(fields, rawField{id: id, typ: t, start: start, end: c.pos})
		last = id
	}
}

// rawList reads the list at b[pos:] (a field's value) and returns its
// element type and each element's bytes.
func rawList(b []byte, pos int) (byte, [][2]int, error) {
	c := thriftChecker{b: b, pos: pos}
	h, err := c.byte1()
	if err != nil {
		return 0, nil, err
	}
	n := uint64(h >> 4)
	if n == 15 {
		if n, err = c.varint(); err != nil {
			return 0, nil, err
		}
	}
	if err := c.count(n, 1); err != nil {
		return 0, nil, err
	}
	et := h & 0x0f
	out := make([][2]int, 0, n)
	for range n {
		start := c.pos
		if err := c.element(et, 1); err != nil {
			return 0, nil, err
		}
		out = append(out, [2]int{start, c.pos})
	}
	return et, out, nil
}

// rawI64 decodes a zigzag varint integer value.
func rawI64(b []byte, f rawField) (int64, error) {
	v, n := binary.Uvarint(b[f.start:f.end])
	if n <= 0 {
		return 0, errors.New("thrift: bad varint")
	}
	return zigzag(v), nil
}

func zigzag(v uint64) int64 { return int64(v>>1) ^ -int64(v&1) }

// Compact types used when writing.
const (
	ctI16    = 4
	ctI32    = 5
	ctI64    = 6
	ctBinary = 8
	ctList   = 9
	ctStruct = 12
)

// rawWriter writes one struct's fields in the compact protocol.
type rawWriter struct {
	b    []byte
	last int16
}

func (w *rawWriter) header(id int16, typ byte) {
	if d := id - w.last; d > 0 && d <= 15 {
		w.b = append(w.b, byte(d)<<4|typ)
	} else {
		w.b = append(w.b, typ)
		w.b = binary.AppendUvarint(w.b, uint64((int64(id)<<1)^(int64(id)>>63)))
	}
	w.last = id
}

// raw writes a field whose value bytes are v, as read (typ as read too).
func (w *rawWriter) raw(id int16, typ byte, v []byte) {
	w.header(id, typ)
	w.b = append(w.b, v...)
}

func (w *rawWriter) int(id int16, typ byte, v int64) {
	w.header(id, typ)
	w.b = binary.AppendUvarint(w.b, uint64((v<<1)^(v>>63)))
}

func (w *rawWriter) binary(id int16, v string) {
	w.header(id, ctBinary)
	w.b = binary.AppendUvarint(w.b, uint64(len(v)))
	w.b = append(w.b, v...)
}

// list writes a list field of n elements of type et, each already encoded.
func (w *rawWriter) list(id int16, et byte, elems [][]byte) {
	w.header(id, ctList)
	if n := len(elems); n < 15 {
		w.b = append(w.b, byte(n)<<4|et)
	} else {
		w.b = append(w.b, 0xf0|et)
		w.b = binary.AppendUvarint(w.b, uint64(n))
	}
	for _, e := range elems {
		w.b = append(w.b, e...)
	}
}

func (w *rawWriter) end() []byte { return append(w.b, 0) }

// rewriteStruct copies the struct at b[pos:], field by field, except the
// fields set replaces (set returns false to copy one as it is, or writes
// its own value with w, or drops it by writing nothing and returning true).
// add is called once at the end to write fields the input lacked; fields
// must be written in increasing id order overall, so add may only write
// ids above every id of the input.
func rewriteStruct(b []byte, pos int, set func(w *rawWriter, f rawField) (bool, error), add func(w *rawWriter)) ([]byte, error) {
	fields, _, err := rawStruct(b, pos)
	if err != nil {
		return nil, err
	}
	var w rawWriter
	for _, f := range fields {
		done, err := set(&w, f)
		if err != nil {
			return nil, err
		}
		if !done {
			w.raw(f.id, f.typ, b[f.start:f.end])
		}
	}
	if add != nil {
		add(&w)
	}
	return w.end(), nil
}

// fieldOf returns the field with id in fields.
func fieldOf(fields []rawField, id int16) (rawField, bool) {
	for _, f := range fields {
		if f.id == id {
			return f, true
		}
	}
	return rawField{}, false
}

// chunkPlace is where a column chunk and its page indexes and bloom
// filter are in the output.
type chunkPlace struct {
	shift                  int64 // new offset − old offset of the chunk's bytes
	columnIndex, offsetIdx byteRange
	bloom                  int64 // new bloom filter offset; 0 = none
}

// rewriteColumnChunk re-encodes the ColumnChunk struct at b[pos:] (an
// input chunk) for its new place: page offsets moved by shift, page index
// and bloom filter offsets set; every other field is copied as it is.
// Field ids from parquet.thrift: ColumnChunk 2 file_offset, 3 meta_data,
// 4–7 offset/column index offset and length; ColumnMetaData 9
// data_page_offset, 10 index_page_offset, 11 dictionary_page_offset, 14
// bloom_filter_offset.
func rewriteColumnChunk(b []byte, pos int, r byteRange, p chunkPlace) ([]byte, error) {
	md := func(w *rawWriter, f rawField) (bool, error) {
		switch f.id {
		case 9, 10, 11:
			v, err := rawI64(b, f)
			if err != nil {
				return false, err
			}
			if v > 0 || f.id == 9 {
				v += p.shift
			}
			w.int(f.id, f.typ, v)
			return true, nil
		case 14:
			if p.bloom > 0 {
				w.int(f.id, f.typ, p.bloom)
			}
			return true, nil
		}
		return false, nil
	}
	return rewriteStruct(b, pos, func(w *rawWriter, f rawField) (bool, error) {
		switch f.id {
		case 2:
			v, err := rawI64(b, f)
			if err != nil {
				return false, err
			}
			// Deprecated and written differently by different writers (the
			// first page, or where inline metadata would follow the chunk):
			// kept relative to the chunk.
			if v >= r.off && v <= r.end() {
				v += p.shift
			} else {
				v = r.off + p.shift
			}
			w.int(f.id, f.typ, v)
			return true, nil
		case 3:
			if f.typ != ctStruct {
				return false, fmt.Errorf("column chunk meta_data has type %d", f.typ)
			}
			v, err := rewriteStruct(b, f.start, md, nil)
			if err != nil {
				return false, err
			}
			w.raw(f.id, f.typ, v)
			return true, nil
		case 4, 5, 6, 7:
			ix := p.offsetIdx
			if f.id >= 6 {
				ix = p.columnIndex
			}
			if ix.n > 0 {
				if f.id%2 == 0 {
					w.int(f.id, f.typ, ix.off)
				} else {
					w.int(f.id, f.typ, ix.n)
				}
			}
			return true, nil
		}
		return false, nil
	}, nil)
}
