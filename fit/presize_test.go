package fit

import (
	"context"
	"slices"
	"testing"

	"github.com/apache/arrow-go/v18/arrow/memory"
)

// TestExpectedRowsChangesNothing reads the same input with a right, a low,
// a high and no row-count hint, with and without sampling: the frames must
// be the same, and a right hint must leave the columns at their first
// allocation.
func TestExpectedRowsChangesNothing(t *testing.T) {
	const n, bs = 200, 64
	for _, size := range []int{0, 30} {
		read := func(expected int64) *Frame {
			mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
			src := idSource(t, mem, n, bs)
			fr, err := ReadSample(context.Background(), src, SampleOptions{Treatment: "t", Covariates: []string{"id", "lvl"},
				SampleRows: size, Seed: 3, ExpectedRows: expected})
			src.Close()
			mem.AssertSize(t, 0)
			if err != nil {
				t.Fatal(err)
			}
			return fr
		}
		want := read(0)
		for _, expected := range []int64{n, 1, 10 * n, -5} {
			fr := read(expected)
			if fr.N() != want.N() || !slices.Equal(fr.Columns[0].Num, want.Columns[0].Num) ||
				!slices.Equal(fr.Columns[1].Codes, want.Columns[1].Codes) || !slices.Equal(fr.Columns[1].Dict, want.Columns[1].Dict) ||
				!slices.Equal(fr.Treatment.Codes, want.Treatment.Codes) || !slices.Equal(fr.originRow, want.originRow) {
				t.Errorf("sample %d, expected rows %d: frame differs from the unhinted read", size, expected)
			}
			if expected == n {
				rows := n
				if size > 0 {
					rows = size
				}
				if c := cap(fr.Columns[0].Num); c != rows {
					t.Errorf("sample %d: id column capacity %d, want %d", size, c, rows)
				}
			}
		}
	}
}
