package pipeline

import (
	"bytes"
	"fmt"
	"os"
	"path/filepath"
	"reflect"
	"testing"

	"github.com/apache/arrow-go/v18/parquet/file"
	"github.com/parquet-go/parquet-go/format"
)

// rawFieldMap returns the fields of the struct at b[pos:] by id, with
// their value bytes, and the ids in the order written.
func rawFieldMap(b []byte, pos int) (map[int16][]byte, []int16) {
	fs, _, err := rawStruct(b, pos)
	if err != nil {
		panic(err)
	}
	m := map[int16][]byte{}
	var ids []int16
	for _, f := range fs {
		m[f.id] = append([]byte{f.typ}, b[f.start:f.end]...)
		ids = append(ids, f.id)
	}
	return m, ids
}

func rawFooterParts(t *testing.T, fb []byte) (root map[int16][]byte, rootIDs []int16, schema [][]byte, rgs [][]map[int16][]byte, mds [][]map[int16][]byte, rgf []map[int16][]byte) {
	root, rootIDs = rawFieldMap(fb, 0)
	fs, _, _ := rawStruct(fb, 0)
	f2, _ := fieldOf(fs, 2)
	_, els, _ := rawList(fb, f2.start)
	for _, e := range els {
		schema = append(schema, fb[e[0]:e[1]])
	}
	f4, _ := fieldOf(fs, 4)
	_, rgl, _ := rawList(fb, f4.start)
	for _, r := range rgl {
		rfs, _, _ := rawStruct(fb, r[0])
		rm, _ := rawFieldMap(fb, r[0])
		rgf = append(rgf, rm)
		c1, _ := fieldOf(rfs, 1)
		_, cl, _ := rawList(fb, c1.start)
		var cs, ms []map[int16][]byte
		for _, c := range cl {
			cm, _ := rawFieldMap(fb, c[0])
			cfs, _, _ := rawStruct(fb, c[0])
			f3, ok := fieldOf(cfs, 3)
			var mm map[int16][]byte
			if ok {
				mm, _ = rawFieldMap(fb, f3.start)
			}
			cs = append(cs, cm)
			ms = append(ms, mm)
		}
		rgs = append(rgs, cs)
		mds = append(mds, ms)
	}
	return
}

// TestSpliceOracle compares the output footer with the input's at the
// level of the raw Thrift fields: every field of every input struct (root,
// schema elements, row groups, column chunks, column metadata) comes out
// byte for byte unless it is an offset splicing moves, with nothing added or
// dropped; and decoded with parquet-go and arrow-go, statistics, counts and
// page flags match. It runs every fixture, in memory and spilled.
func TestSpliceOracle(t *testing.T) {
	for _, spill := range []int64{0, 100} {
		for _, fx := range append(spliceFixtures(), extraFixtures()...) {
			t.Run(fmt.Sprintf("%s/spill%d", fx.name, spill), func(t *testing.T) {
				dir := t.TempDir()
				in, out := filepath.Join(dir, "in.parquet"), filepath.Join(dir, "out.parquet")
				rows := fx.write(t, in)
				schema := appendedSchema
				if fx.renamed {
					schema = renamedSchema
				}
				spliceWith(t, in, out, rows, schema, SpliceOptions{SpillRows: spill})
				ib, _ := os.ReadFile(in)
				ob, _ := os.ReadFile(out)
				ifb, ofb := footerBytes(ib), footerBytes(ob)
				if err := checkThriftSizes(ofb); err != nil {
					t.Fatal(err)
				}
				ir, iids, isc, irg, imd, irgf := rawFooterParts(t, ifb)
				or, oids, osc, org, omd, orgf := rawFooterParts(t, ofb)
				t.Logf("root ids in %v out %v", iids, oids)
				for id, v := range ir {
					if id == 2 || id == 4 || id == 5 || id == 7 || id == 1 {
						continue
					}
					if !bytes.Equal(v, or[id]) {
						t.Errorf("root field %d differs", id)
					}
				}
				for id := range or {
					if _, ok := ir[id]; !ok && id != 5 {
						t.Errorf("root field %d added", id)
					}
				}
				for i := 1; i < len(isc); i++ {
					if !bytes.Equal(isc[i], osc[i]) {
						t.Errorf("schema %d differs", i)
					}
				}
				nIn := len(irg)
				_ = nIn
				for i := range irg {
					for id, v := range irgf[i] {
						if id == 4 || id > 7 {
							if !bytes.Equal(v, orgf[i][id]) {
								t.Errorf("rg %d field %d differs", i, id)
							}
						}
					}
					for id := range orgf[i] {
						if _, ok := irgf[i][id]; !ok {
							t.Logf("rg %d field %d added", i, id)
						}
					}
					for j := range irg[i] {
						for id, v := range irg[i][j] {
							if id >= 2 && id <= 7 {
								if _, ok := org[i][j][id]; !ok && id != 3 {
									t.Errorf("rg %d col %d cc field %d dropped", i, j, id)
								}
								continue
							}
							if !bytes.Equal(v, org[i][j][id]) {
								t.Errorf("rg %d col %d cc field %d differs", i, j, id)
							}
						}
						for id := range org[i][j] {
							if _, ok := irg[i][j][id]; !ok {
								t.Errorf("rg %d col %d cc field %d added", i, j, id)
							}
						}
						for id, v := range imd[i][j] {
							if id >= 9 && id <= 11 || id == 14 {
								if _, ok := omd[i][j][id]; !ok {
									t.Errorf("rg %d col %d md field %d dropped", i, j, id)
								}
								continue
							}
							if !bytes.Equal(v, omd[i][j][id]) {
								t.Errorf("rg %d col %d md field %d differs", i, j, id)
							}
						}
						for id := range omd[i][j] {
							if _, ok := imd[i][j][id]; !ok {
								t.Errorf("rg %d col %d md field %d added", i, j, id)
							}
						}
					}
				}
				// parquet-go decode of both
				im, om := readFooter(t, ib), readFooter(t, ob)
				nLeaves := 0
				for _, el := range im.Schema[1:] {
					if n, ok := el.NumChildren.Get(); !ok || n == 0 {
						nLeaves++
					}
				}
				rn, _ := im.Schema[0].NumChildren.Get()
				on, _ := om.Schema[0].NumChildren.Get()
				if on != rn+int32(schema.NumFields()) {
					t.Errorf("num_children %d -> %d", rn, on)
				}
				if len(om.ColumnOrders) != 0 && len(om.ColumnOrders) != nLeaves+schema.NumFields() {
					t.Errorf("column orders %d for %d leaves", len(om.ColumnOrders), nLeaves+schema.NumFields())
				}
				if (len(im.ColumnOrders) == 0) != (len(om.ColumnOrders) == 0) {
					t.Errorf("column orders in %d out %d", len(im.ColumnOrders), len(om.ColumnOrders))
				}
				if om.NumRows != im.NumRows || om.Version < im.Version || om.CreatedBy != im.CreatedBy {
					t.Errorf("root: rows %d/%d version %d/%d createdby %q/%q", im.NumRows, om.NumRows, im.Version, om.Version, im.CreatedBy, om.CreatedBy)
				}
				var tot int64
				for i := range om.RowGroups {
					ig, og := &im.RowGroups[i], &om.RowGroups[i]
					if og.NumRows != ig.NumRows || int(og.Ordinal) != i {
						t.Errorf("rg %d rows/ordinal", i)
					}
					if !reflect.DeepEqual(ig.SortingColumns, og.SortingColumns) {
						t.Errorf("sorting")
					}
					var comp, unc int64
					for j, c := range og.Columns {
						comp += c.MetaData.TotalCompressedSize
						unc += c.MetaData.TotalUncompressedSize
						md := c.MetaData
						r := byteRange{md.DataPageOffset, md.TotalCompressedSize}
						if md.DictionaryPageOffset > 0 && md.DictionaryPageOffset < r.off {
							r.off = md.DictionaryPageOffset
						}
						if j == 0 && og.FileOffset != r.off {
							t.Errorf("rg %d file_offset %d first chunk %d", i, og.FileOffset, r.off)
						}
						if c.FileOffset < r.off || c.FileOffset > r.end() {
							t.Errorf("rg %d col %d chunk file_offset %d outside %v", i, j, c.FileOffset, r)
						}
						if j < len(ig.Columns) {
							a, b := ig.Columns[j].MetaData, md
							a.DataPageOffset, b.DataPageOffset = 0, 0
							a.DictionaryPageOffset, b.DictionaryPageOffset = 0, 0
							a.IndexPageOffset, b.IndexPageOffset = 0, 0
							a.BloomFilterOffset, b.BloomFilterOffset = 0, 0
							if !reflect.DeepEqual(a, b) {
								t.Errorf("rg %d col %d md differs\n%+v\n%+v", i, j, a, b)
							}
						}
					}
					if og.TotalCompressedSize != comp {
						t.Errorf("rg %d total_compressed %d sum %d", i, og.TotalCompressedSize, comp)
					}
					_ = unc
					tot += og.NumRows
				}
				// arrow-go
				pf, err := file.OpenParquetFile(out, false)
				if err != nil {
					t.Fatal(err)
				}
				defer pf.Close()
				ipf, _ := file.OpenParquetFile(in, false)
				defer ipf.Close()
				for i := 0; i < pf.NumRowGroups(); i++ {
					org := pf.MetaData().RowGroup(i)
					irg := ipf.MetaData().RowGroup(i)
					if org.TotalByteSize() < irg.TotalByteSize() {
						t.Errorf("tbs")
					}
					for j := 0; j < irg.NumColumns(); j++ {
						a, _ := irg.ColumnChunk(j)
						b, _ := org.ColumnChunk(j)
						as, _ := a.StatsSet()
						bs, _ := b.StatsSet()
						if as != bs {
							t.Errorf("stats set %v %v", as, bs)
						}
						if as {
							x, _ := a.Statistics()
							y, _ := b.Statistics()
							if x.HasNullCount() != y.HasNullCount() || x.NullCount() != y.NullCount() || x.HasMinMax() != y.HasMinMax() {
								t.Errorf("rg %d col %d stats differ", i, j)
							}
						}
						if a.HasIndexPage() != b.HasIndexPage() || a.HasDictionaryPage() != b.HasDictionaryPage() {
							t.Errorf("rg %d col %d index/dict page flags", i, j)
						}
					}
				}
				_ = format.FileMetaData{}
			})
		}
	}
}
