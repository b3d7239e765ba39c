package pipeline

import (
	"encoding/binary"
	"errors"
	"fmt"
)

// checkThriftSizes walks the Thrift compact-protocol struct at the start of
// b without decoding it and fails when a list, set, map, string or binary
// claims more elements or bytes than remain in b, or nesting is deeper than
// any Parquet structure. parquet-go's decoder allocates a list as long as
// its header says before reading an element, so a damaged footer or page
// header could otherwise ask for gigabytes; after this check every
// allocation is bounded by the input's length. Compact protocol: field
// header (delta<<4 | type, or 0 then a zigzag varint id), varints for
// integers, length-prefixed binary, size<<4 | type list headers (15 = a
// varint size follows), varint-sized maps with a key<<4 | value type byte.
func checkThriftSizes(b []byte) error {
	c := thriftChecker{b: b}
	return c.structure(0)
}

type thriftChecker struct {
	b   []byte
	pos int
}

const maxThriftDepth = 32

var errThriftShort = errors.New("thrift: truncated")

func (c *thriftChecker) byte1() (byte, error) {
	if c.pos >= len(c.b) {
		return 0, errThriftShort
	}
	v := c.b[c.pos]
	c.pos++
	return v, nil
}

func (c *thriftChecker) varint() (uint64, error) {
	v, n := binary.Uvarint(c.b[c.pos:])
	if n <= 0 {
		return 0, errThriftShort
	}
	c.pos += n
	return v, nil
}

func (c *thriftChecker) skip(n uint64) error {
	if n > uint64(len(c.b)-c.pos) {
		return fmt.Errorf("thrift: %d bytes claimed, %d remain", n, len(c.b)-c.pos)
	}
	c.pos += int(n)
	return nil
}

// count reads a container size and checks that elements of at least min
// bytes each would fit in what remains.
func (c *thriftChecker) count(n uint64, min int) error {
	if n*uint64(min) > uint64(len(c.b)-c.pos) || n > uint64(len(c.b)) {
		return fmt.Errorf("thrift: a container claims %d elements, %d bytes remain", n, len(c.b)-c.pos)
	}
	return nil
}

func (c *thriftChecker) structure(depth int) error {
	if depth > maxThriftDepth {
		return errors.New("thrift: nested too deep")
	}
	for {
		h, err := c.byte1()
		if err != nil {
			return err
		}
		t := h & 0x0f
		if t == 0 {
			return nil // stop
		}
		if h>>4 == 0 { // explicit field id
			if _, err := c.varint(); err != nil {
				return err
			}
		}
		if err := c.value(t, depth); err != nil {
			return err
		}
	}
}

// value skips one value of compact type t. In a struct the booleans' value
// is in the type itself; in a container it is a byte (see element).
func (c *thriftChecker) value(t byte, depth int) error {
	switch t {
	case 1, 2: // boolean true / false
		return nil
	default:
		return c.element(t, depth)
	}
}

func (c *thriftChecker) element(t byte, depth int) error {
	switch t {
	case 1, 2, 3: // bool in a container, byte
		return c.skip(1)
	case 4, 5, 6: // i16, i32, i64
		_, err := c.varint()
		return err
	case 7: // double
		return c.skip(8)
	case 8: // binary
		n, err := c.varint()
		if err != nil {
			return err
		}
		return c.skip(n)
	case 9, 10: // list, set
		h, err := c.byte1()
		if err != nil {
			return err
		}
		n := uint64(h >> 4)
		if n == 15 {
			if n, err = c.varint(); err != nil {
				return err
			}
		}
		if err := c.count(n, 1); err != nil {
			return err
		}
		for range n {
			if err := c.element(h&0x0f, depth+1); err != nil {
				return err
			}
		}
		return nil
	case 11: // map
		n, err := c.varint()
		if err != nil || n == 0 {
			return err
		}
		kv, err := c.byte1()
		if err != nil {
			return err
		}
		if err := c.count(n, 2); err != nil {
			return err
		}
		for range n {
			if err := c.element(kv>>4, depth+1); err != nil {
				return err
			}
			if err := c.element(kv&0x0f, depth+1); err != nil {
				return err
			}
		}
		return nil
	case 12: // struct
		return c.structure(depth + 1)
	case 13: // uuid
		return c.skip(16)
	}
	return fmt.Errorf("thrift: unknown type %d", t)
}
