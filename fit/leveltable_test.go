package fit

import (
	"fmt"
	"math/rand/v2"
	"testing"

	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"
)

// The table must agree with the map it is built from, for every level and
// for values that are not levels, and for sliced arrays.
func TestLevelTableMatchesMap(t *testing.T) {
	r := rand.New(rand.NewPCG(3, 4))
	for _, nLevels := range []int{1, 2, 7, 8, 33, 200} {
		pos := map[string]int32{}
		var levels []string
		for k := 0; k < nLevels; k++ {
			l := fmt.Sprintf("lvl-%d-%x", k, r.Uint32())
			if k == 0 {
				l = "" // an empty string is a level too
			}
			pos[l] = int32(k - 1)
			levels = append(levels, l)
		}
		tab := newLevelTable(pos)
		b := array.NewStringBuilder(memory.DefaultAllocator)
		var want []int32
		for i := 0; i < 500; i++ {
			if r.IntN(5) == 0 {
				b.Append(fmt.Sprintf("unseen-%d", i))
				want = append(want, posUnseen)
				continue
			}
			l := levels[r.IntN(len(levels))]
			b.Append(l)
			want = append(want, pos[l])
		}
		arr := b.NewStringArray()
		b.Release()
		for _, off := range []int{0, 17} {
			sl := array.NewSlice(arr, int64(off), int64(arr.Len())).(*array.String)
			out := make([]int32, sl.Len())
			if !tab.stringPositions(sl, out) {
				t.Fatal("plain string array not handled")
			}
			for i, p := range out {
				if p != want[off+i] {
					t.Fatalf("%d levels, offset %d, row %d (%q): %d, want %d", nLevels, off, i, sl.Value(i), p, want[off+i])
				}
			}
			sl.Release()
		}
		arr.Release()
	}
}
