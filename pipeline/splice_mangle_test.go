package pipeline

import (
	"bytes"
	"encoding/binary"
	"os"
	"path/filepath"
	"reflect"
	"slices"
	"testing"
)

type mangle struct {
	long, reverse, unknown bool
}

func zz(v int64) uint64 { return uint64((v << 1) ^ (v >> 63)) }

// re-encode struct at pos; ctx names the struct kind for unknown fields.
func (m mangle) structAt(b []byte, pos int, ctx string) []byte {
	fs, _, err := rawStruct(b, pos)
	if err != nil {
		panic(err)
	}
	type enc struct {
		id  int16
		typ byte
		v   []byte
	}
	var out []enc
	for _, f := range fs {
		v := b[f.start:f.end]
		sub := ""
		switch {
		case ctx == "root" && f.id == 2:
			sub = "schema"
		case ctx == "root" && f.id == 4:
			sub = "rg"
		case ctx == "rg" && f.id == 1:
			sub = "cc"
		}
		if f.typ == ctStruct {
			c := ""
			if ctx == "cc" && f.id == 3 {
				c = "md"
			}
			v = m.structAt(b, f.start, c)
		} else if f.typ == ctList {
			et, els, err := rawList(b, f.start)
			if err != nil {
				panic(err)
			}
			if et == ctStruct {
				var w []byte
				if n := len(els); n < 15 {
					w = append(w, byte(n)<<4|et)
				} else {
					w = append(w, 0xf0|et)
					w = binary.AppendUvarint(w, uint64(n))
				}
				for _, e := range els {
					w = append(w, m.structAt(b, e[0], sub)...)
				}
				v = w
			}
		}
		out = append(out, enc{f.id, f.typ, v})
	}
	if m.unknown && ctx != "" {
		// bool true in type nibble, a far id i32, a nested struct with a list of 20 i16
		var st []byte
		st = append(st, 0x19) // field 1 list
		st = append(st, 0xf4)
		st = binary.AppendUvarint(st, 20)
		for i := range 20 {
			st = binary.AppendUvarint(st, zz(int64(i-10)))
		}
		st = append(st, 0x21) // field 3 bool true
		st = append(st, 0)
		out = append(out, enc{900, 1, nil}, enc{901, 2, nil}, enc{1000, 5, binary.AppendUvarint(nil, zz(-7))}, enc{1001, ctStruct, st})
	}
	if m.reverse {
		slices.Reverse(out)
	}
	var w []byte
	var last int16
	for _, e := range out {
		if d := e.id - last; !m.long && d > 0 && d <= 15 {
			w = append(w, byte(d)<<4|e.typ)
		} else {
			w = append(w, e.typ)
			w = binary.AppendUvarint(w, zz(int64(e.id)))
		}
		last = e.id
		w = append(w, e.v...)
	}
	return append(w, 0)
}

// TestSpliceMangled feeds footers re-encoded in legal but unusual ways
// (every field header in long form, fields in reverse order, unknown fields
// of every type at every level, booleans carried in the type nibble): the
// spliced file reads as the clean one does and keeps the unknown fields.
func TestSpliceMangled(t *testing.T) {
	for _, m := range []mangle{{long: true}, {reverse: true}, {unknown: true}, {true, true, true}} {
		for _, fx := range append(spliceFixtures(), extraFixtures()...) {
			if fx.name == "zero rows" {
				continue
			}
			t.Run(fx.name, func(t *testing.T) {
				dir := t.TempDir()
				in0, in, out := filepath.Join(dir, "in0.parquet"), filepath.Join(dir, "in.parquet"), filepath.Join(dir, "out.parquet")
				rows := fx.write(t, in0)
				b, _ := os.ReadFile(in0)
				fb := footerBytes(b)
				nb := m.structAt(fb, 0, "root")
				data := b[:len(b)-8-len(fb)]
				nf := append(slices.Clone(data), nb...)
				nf = binary.LittleEndian.AppendUint32(nf, uint32(len(nb)))
				nf = append(nf, "PAR1"...)
				os.WriteFile(in, nf, 0o644)
				schema := appendedSchema
				if fx.renamed {
					schema = renamedSchema
				}
				if _, err := PlanSplice(in); err != nil {
					t.Fatalf("%+v: plan: %v", m, err)
				}
				spliceWith(t, in, out, rows, schema, SpliceOptions{})
				spliceWith(t, in0, out+"0", rows, schema, SpliceOptions{})
				a := readFooter(t, mustRead(t, out+"0"))
				c := readFooter(t, mustRead(t, out))
				if !reflect.DeepEqual(a, c) {
					t.Errorf("%+v: decoded footers differ", m)
				}
				ob := mustRead(t, out)
				o0 := mustRead(t, out+"0")
				if !bytes.Equal(ob[:len(ob)-8-len(footerBytes(ob))], o0[:len(o0)-8-len(footerBytes(o0))]) {
					t.Errorf("%+v: data differs", m)
				}
				if m.unknown {
					// unknown fields preserved at each level?
					ofb := footerBytes(ob)
					root, _ := rawFieldMap(ofb, 0)
					if _, ok := root[1001]; !ok {
						t.Errorf("root unknown dropped")
					}
					_, _, sc, rgs, mds, rgf := rawFooterParts(t, ofb)
					for i := 1; i < len(sc)-schema.NumFields(); i++ {
						f, _ := rawFieldMap(sc[i], 0)
						if _, ok := f[1001]; !ok {
							t.Errorf("schema %d unknown dropped", i)
						}
					}
					f0, _ := rawFieldMap(sc[0], 0)
					if _, ok := f0[900]; !ok {
						t.Errorf("schema root unknown dropped")
					}
					for i := range rgs {
						if _, ok := rgf[i][1001]; !ok {
							t.Errorf("rg unknown dropped")
						}
						if v, ok := rgf[i][900]; !ok || v[0] != 1 {
							t.Errorf("rg bool dropped %v", v)
						}
						for j := 0; j < len(rgs[i])-schema.NumFields(); j++ {
							if _, ok := rgs[i][j][1001]; !ok {
								t.Errorf("cc unknown dropped")
							}
							if v, ok := mds[i][j][901]; !ok || v[0] != 2 {
								t.Errorf("md bool dropped")
							}
						}
					}
				}
			})
		}
	}
}
