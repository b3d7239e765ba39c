package pipeline

import (
	"bytes"
	"encoding/binary"
	"math/rand/v2"
	"testing"
)

func genValue(r *rand.Rand, t byte, depth int, inList bool) []byte {
	switch t {
	case 1, 2:
		if inList {
			return []byte{byte(1 + r.IntN(2))}
		}
		return nil
	case 3:
		return []byte{byte(r.IntN(256))}
	case 4, 5, 6:
		return binary.AppendUvarint(nil, zz(r.Int64N(1<<40)-(1<<39)))
	case 7:
		return make([]byte, 8)
	case 8:
		n := r.IntN(5)
		return append(binary.AppendUvarint(nil, uint64(n)), bytes.Repeat([]byte{'x'}, n)...)
	case 9:
		et := []byte{1, 3, 4, 5, 6, 8, 12}[r.IntN(7)]
		if depth > 3 {
			et = 5
		}
		n := r.IntN(20)
		var b []byte
		if n < 15 {
			b = []byte{byte(n)<<4 | et}
		} else {
			b = append([]byte{0xf0 | et}, binary.AppendUvarint(nil, uint64(n))...)
		}
		for range n {
			b = append(b, genValue(r, et, depth+1, true)...)
		}
		return b
	case 12:
		return genStruct(r, depth+1)
	}
	panic(t)
}

func genStruct(r *rand.Rand, depth int) []byte {
	var b []byte
	var last int16
	n := r.IntN(6)
	if depth > 3 {
		n = r.IntN(2)
	}
	for range n {
		id := int16(r.IntN(40) - 5)
		if r.IntN(4) == 0 {
			id = int16(r.IntN(60000) - 30000)
		}
		t := []byte{1, 2, 3, 4, 5, 6, 7, 8, 9, 12}[r.IntN(10)]
		if d := id - last; d > 0 && d <= 15 && r.IntN(3) > 0 {
			b = append(b, byte(d)<<4|t)
		} else {
			b = append(b, t)
			b = binary.AppendUvarint(b, zz(int64(id)))
		}
		last = id
		b = append(b, genValue(r, t, depth, false)...)
	}
	return append(b, 0)
}

// TestThriftRawRoundTrip copies and re-encodes 20,000 random structs
// (random ids in long and short form, every type, nested lists of 15 or
// more elements and structs) with rewriteStruct and rawWriter and checks
// that every field keeps its id, type and bytes.
func TestThriftRawRoundTrip(t *testing.T) {
	r := rand.New(rand.NewPCG(1, 2))
	for i := range 20000 {
		b := genStruct(r, 0)
		if err := checkThriftSizes(b); err != nil {
			t.Fatalf("%d gen invalid: %v", i, err)
		}
		out, err := rewriteStruct(b, 0, func(w *rawWriter, f rawField) (bool, error) { return false, nil }, nil)
		if err != nil {
			t.Fatal(err)
		}
		if err := checkThriftSizes(out); err != nil {
			t.Fatal(err)
		}
		a, _, _ := rawStruct(b, 0)
		c, end, _ := rawStruct(out, 0)
		if end != len(out) || len(a) != len(c) {
			t.Fatalf("%d: fields %d vs %d", i, len(a), len(c))
		}
		for k := range a {
			if a[k].id != c[k].id || a[k].typ != c[k].typ || !bytes.Equal(b[a[k].start:a[k].end], out[c[k].start:c[k].end]) {
				t.Fatalf("%d: field %d differs", i, k)
			}
		}
		// list re-encode
		for _, f := range a {
			if f.typ == ctList {
				et, els, err := rawList(b, f.start)
				if err != nil {
					t.Fatal(err)
				}
				var w rawWriter
				var es [][]byte
				for _, e := range els {
					es = append(es, b[e[0]:e[1]])
				}
				w.list(f.id, et, es)
				got := w.end()
				fs, _, err := rawStruct(got, 0)
				if err != nil || len(fs) != 1 || !bytes.Equal(got[fs[0].start:fs[0].end], b[f.start:f.end]) {
					t.Fatalf("%d: list re-encode differs", i)
				}
			}
		}
	}
}
