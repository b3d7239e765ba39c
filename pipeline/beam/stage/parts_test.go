package stage

import (
	"reflect"
	"testing"

	"github.com/heft-project/heft/pipeline"
)

func TestSplitRowGroups(t *testing.T) {
	type r = pipeline.RowGroupRange
	for _, tc := range []struct {
		rows     []int64
		partRows int64
		want     []r
	}{
		{nil, 10, []r{{}}},
		{[]int64{5}, 1, []r{{}}},
		{[]int64{5, 5}, 10, []r{{}}},
		{[]int64{5, 5, 5}, 10, []r{{First: 0, N: 2}, {First: 2, N: 1}}},
		{[]int64{4, 4, 4, 4}, 8, []r{{First: 0, N: 2}, {First: 2, N: 2}}},
		{[]int64{20, 1, 1, 20}, 10, []r{{First: 0, N: 1}, {First: 1, N: 3}}},
		{[]int64{3, 3, 3}, 1, []r{{First: 0, N: 1}, {First: 1, N: 1}, {First: 2, N: 1}}},
	} {
		if got := splitRowGroups(tc.rows, tc.partRows); !reflect.DeepEqual(got, tc.want) {
			t.Errorf("splitRowGroups(%v, %d) = %v, want %v", tc.rows, tc.partRows, got, tc.want)
		}
	}
}

func TestPartRel(t *testing.T) {
	for _, tc := range []struct {
		rel  string
		r    pipeline.RowGroupRange
		want string
	}{
		{"year=2026/part-00001.parquet", pipeline.RowGroupRange{}, "year=2026/part-00001.parquet"},
		{"year=2026/part-00001.parquet", pipeline.RowGroupRange{First: 4, N: 4}, "year=2026/part-00001-rg000004-000007.parquet"},
		{"big.parquet", pipeline.RowGroupRange{First: 0, N: 1}, "big-rg000000-000000.parquet"},
	} {
		if got := partRel(tc.rel, tc.r); got != tc.want {
			t.Errorf("partRel(%q, %v) = %q, want %q", tc.rel, tc.r, got, tc.want)
		}
	}
}
