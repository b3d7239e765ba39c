package fit

import "github.com/apache/arrow-go/v18/arrow/array"

// levelTable finds a categorical level's position from the bytes of a plain
// string value without a Go map or a string conversion: open addressing in a
// power-of-two table at most a quarter full, FNV-1a over the bytes. This is
// the score stage's hot path for string columns, which the Parquet source
// reads as plain strings.
type levelTable struct {
	mask  uint64
	slots []levelSlot
}

type levelSlot struct {
	key  string
	pos  int32
	used bool
}

func newLevelTable(pos map[string]int32) *levelTable {
	size := 8
	for size < 4*len(pos) {
		size *= 2
	}
	t := &levelTable{mask: uint64(size - 1), slots: make([]levelSlot, size)}
	for k, p := range pos {
		i := fnv1a(k) & t.mask
		for t.slots[i].used {
			i = (i + 1) & t.mask
		}
		t.slots[i] = levelSlot{key: k, pos: p, used: true}
	}
	return t
}

// fnv1a is the 64-bit FNV-1a hash (Fowler, Noll & Vo); generic over string
// and []byte so both hash identically.
func fnv1a[T string | []byte](b T) uint64 {
	h := uint64(14695981039346656037)
	for i := 0; i < len(b); i++ {
		h = (h ^ uint64(b[i])) * 1099511628211
	}
	return h
}

// find returns the position of level b, or posUnseen.
func (t *levelTable) find(b []byte) int32 {
	i := fnv1a(b) & t.mask
	for {
		s := &t.slots[i]
		if !s.used {
			return posUnseen
		}
		if s.key == string(b) {
			return s.pos
		}
		i = (i + 1) & t.mask
	}
}

// stringPositions fills out for a plain string array through the table,
// straight from the offsets and bytes. It reports false for other types.
func (t *levelTable) stringPositions(arr any, out []int32) bool {
	switch a := arr.(type) {
	case *array.String:
		findAll(t, a.ValueOffsets(), a.ValueBytes(), out)
		return true
	case *array.LargeString:
		findAll(t, a.ValueOffsets(), a.ValueBytes(), out)
		return true
	}
	return false
}

// findAll looks up each value of a string array given as its offsets (32-
// or 64-bit) and bytes.
func findAll[O int32 | int64](t *levelTable, offs []O, data []byte, out []int32) {
	base := offs[0]
	for i := range out {
		out[i] = t.find(data[offs[i]-base : offs[i+1]-base])
	}
}
