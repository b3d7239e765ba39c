package pipeline

import (
	"encoding/binary"
	"errors"
	"fmt"
	"io/fs"

	flatbuffers "github.com/google/flatbuffers/go"
)

// ErrMalformed marks data the readers could not decode: a corrupt page, a
// truncated file, a footer that lies. It is wrapped in an *Error naming the
// place, so errors.Is(err, ErrMalformed) tells bad data from bad arguments.
var ErrMalformed = errors.New("malformed data")

// guard runs f and turns a panic inside it into an *Error for file wrapping
// ErrMalformed. The Arrow and Parquet decoders index slices straight from
// lengths stored in the file, so a damaged file can panic anywhere below
// them; every call into them goes through guard. An error returned by f is
// located at file unless it already is an *Error.
func guard(file string, f func() error) (err error) {
	defer func() {
		if r := recover(); r != nil {
			err = At(file, malformed(r))
		}
	}()
	if err := f(); err != nil {
		return locate(err, file, -1, "")
	}
	return nil
}

// malformed wraps a recovered panic value in ErrMalformed.
func malformed(r any) error {
	return fmt.Errorf("%w: decoder panic: %v", ErrMalformed, r)
}

// locate returns err as an *Error at file, filling in the row group and
// column where they are unknown. An *Error naming another file is wrapped,
// not rewritten, so the inner location survives.
func locate(err error, file string, rowGroup int, column string) error {
	if err == nil {
		return nil
	}
	var e *Error
	if errors.As(err, &e) && (e.File == file || e.File == "") {
		out := *e
		out.File = file
		if out.RowGroup < 0 {
			out.RowGroup = rowGroup
		}
		if out.Column == "" {
			out.Column = column
		}
		return &out
	}
	var pe *fs.PathError
	if errors.As(err, &pe) && pe.Path == file {
		// The Error already names the file; say it once.
		err = fmt.Errorf("%s: %w", pe.Op, pe.Err)
	}
	return &Error{File: file, RowGroup: rowGroup, Row: -1, Column: column, Err: err}
}

// Some damage cannot be recovered from: arrow-go sizes slices from counts
// stored in an Arrow schema flatbuffer (fields, children, metadata, union
// type ids), so one bad count asks for terabytes and the runtime dies. The
// checks below bound every such count by the bytes that would have to hold
// it, and cap nesting, before an Arrow schema reaches the decoder: the
// schema message of an IPC stream, the footer schema of an IPC file and the
// ARROW:schema entry of a Parquet file.

const (
	fbMaxDepth  = 64      // nesting of child fields
	fbMaxFields = 1 << 20 // fields visited, children included
)

// Flatbuffer vtable slots of the Arrow IPC tables we walk (Schema.fbs,
// Message.fbs, File.fbs): slot k is at vtable offset 4+2k.
const (
	fbMessageHeader        = 8  // Message.header
	fbFooterSchema         = 6  // Footer.schema
	fbSchemaFields         = 6  // Schema.fields
	fbSchemaMetadata       = 8  // Schema.custom_metadata
	fbSchemaFeatures       = 10 // Schema.features (int64 each)
	fbFieldTypeType        = 8  // Field.type_type
	fbFieldType            = 10 // Field.type
	fbFieldChildren        = 14 // Field.children
	fbFieldMetadata        = 16 // Field.custom_metadata
	fbUnionTypeIDs         = 6  // Union.typeIds (int32 each)
	fbTypeUnion      uint8 = 14 // Type.Union
)

type fbChecker struct {
	buf    []byte
	fields int
}

var errFBCount = errors.New("a count in the Arrow schema exceeds the bytes that hold it")

// vector returns the start and length of the vector in slot, checking that
// n elements of elem bytes fit in the buffer. ok is false for an absent slot.
func (c *fbChecker) vector(t *flatbuffers.Table, slot flatbuffers.VOffsetT, elem int) (start flatbuffers.UOffsetT, n int, ok bool, err error) {
	o := flatbuffers.UOffsetT(t.Offset(slot))
	if o == 0 {
		return 0, 0, false, nil
	}
	start, n = t.Vector(o), t.VectorLen(o)
	if n < 0 || int64(start)+int64(n)*int64(elem) > int64(len(c.buf)) {
		return 0, 0, false, errFBCount
	}
	return start, n, true, nil
}

// table follows the sub-table in slot.
func (c *fbChecker) table(t *flatbuffers.Table, slot flatbuffers.VOffsetT) (flatbuffers.Table, bool) {
	o := flatbuffers.UOffsetT(t.Offset(slot))
	if o == 0 {
		return flatbuffers.Table{}, false
	}
	return flatbuffers.Table{Bytes: c.buf, Pos: t.Indirect(o + t.Pos)}, true
}

func (c *fbChecker) schema(t flatbuffers.Table) error {
	for _, v := range []struct {
		slot flatbuffers.VOffsetT
		elem int
	}{{fbSchemaMetadata, 4}, {fbSchemaFeatures, 8}} {
		if _, _, _, err := c.vector(&t, v.slot, v.elem); err != nil {
			return err
		}
	}
	return c.fieldVector(&t, fbSchemaFields, 0)
}

func (c *fbChecker) fieldVector(t *flatbuffers.Table, slot flatbuffers.VOffsetT, depth int) error {
	start, n, ok, err := c.vector(t, slot, 4)
	if !ok || err != nil {
		return err
	}
	if depth > fbMaxDepth {
		return fmt.Errorf("Arrow schema nests fields deeper than %d", fbMaxDepth)
	}
	for i := range n {
		if c.fields++; c.fields > fbMaxFields {
			return fmt.Errorf("Arrow schema has more than %d fields", fbMaxFields)
		}
		f := flatbuffers.Table{Bytes: c.buf, Pos: t.Indirect(start + flatbuffers.UOffsetT(i)*4)}
		if _, _, _, err := c.vector(&f, fbFieldMetadata, 4); err != nil {
			return err
		}
		if o := flatbuffers.UOffsetT(f.Offset(fbFieldTypeType)); o != 0 && f.GetUint8(o+f.Pos) == fbTypeUnion {
			if u, ok := c.table(&f, fbFieldType); ok {
				if _, _, _, err := c.vector(&u, fbUnionTypeIDs, 4); err != nil {
					return err
				}
			}
		}
		if err := c.fieldVector(&f, fbFieldChildren, depth+1); err != nil {
			return err
		}
	}
	return nil
}

// checkSchemaFlatbuffer checks buf, a flatbuffer whose root is a Message
// (holding a Schema) or, with footer, an IPC file Footer.
func checkSchemaFlatbuffer(buf []byte, footer bool) (err error) {
	defer func() {
		if r := recover(); r != nil { // offsets out of bounds
			err = fmt.Errorf("%w: Arrow schema flatbuffer: %v", ErrMalformed, r)
		}
	}()
	if len(buf) < 4 {
		return fmt.Errorf("%w: Arrow schema flatbuffer of %d bytes", ErrMalformed, len(buf))
	}
	c := &fbChecker{buf: buf}
	root := flatbuffers.Table{Bytes: buf, Pos: flatbuffers.GetUOffsetT(buf)}
	slot := flatbuffers.VOffsetT(fbMessageHeader)
	if footer {
		slot = fbFooterSchema
	}
	sc, ok := c.table(&root, slot)
	if !ok {
		return nil // no schema: the decoder reports that itself
	}
	if err := c.schema(sc); err != nil {
		return fmt.Errorf("%w: %w", ErrMalformed, err)
	}
	return nil
}

// checkIPCMessage checks an encapsulated IPC schema message: an optional
// 0xFFFFFFFF continuation marker, a little-endian int32 length, and the
// Message flatbuffer.
func checkIPCMessage(msg []byte) error {
	if len(msg) >= 4 && binary.LittleEndian.Uint32(msg) == 0xFFFFFFFF {
		msg = msg[4:]
	}
	if len(msg) < 4 {
		return fmt.Errorf("%w: Arrow IPC message of %d bytes", ErrMalformed, len(msg))
	}
	n := int64(int32(binary.LittleEndian.Uint32(msg)))
	msg = msg[4:]
	if n < 0 || n > int64(len(msg)) {
		return fmt.Errorf("%w: Arrow IPC message claims %d bytes, %d present", ErrMalformed, n, len(msg))
	}
	return checkSchemaFlatbuffer(msg[:n], false)
}
