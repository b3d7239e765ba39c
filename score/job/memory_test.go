package job

import (
	"slices"
	"testing"
)

func TestMemoryLimitFor(t *testing.T) {
	for _, c := range []struct {
		cols int
		want int64
	}{{0, MemoryLimit}, {10, MemoryLimit}, {38, MemoryLimit}, {101, 101 * memoryLimitPerColumn}} {
		if got := MemoryLimitFor(c.cols); got != c.want {
			t.Errorf("%d columns: limit %d, want %d", c.cols, got, c.want)
		}
	}
}

func TestBatchRowsFor(t *testing.T) {
	for _, c := range []struct{ cols, flag, want int }{
		{10, 65536, 65536}, {16, 65536, 65536}, {21, 65536, 49152}, {101, 65536, 10240},
		{1000, 65536, minBatchRows}, {101, 5000, 5000},
	} {
		if got := BatchRowsFor(c.cols, c.flag); got != c.want {
			t.Errorf("%d columns, batch rows %d: %d, want %d", c.cols, c.flag, got, c.want)
		}
	}
}

func TestByColumns(t *testing.T) {
	for _, c := range []struct {
		by   string
		want []string
	}{{"", nil}, {"district", []string{"district"}}, {" district , year,,", []string{"district", "year"}}} {
		f := Flags{By: c.by}
		if got := f.ByColumns(); !slices.Equal(got, c.want) {
			t.Errorf("--by %q: %q, want %q", c.by, got, c.want)
		}
	}
}
