package stage

import (
	"fmt"
	"path/filepath"
	"strings"

	"github.com/heft-project/heft/pipeline"
)

// DefaultPartRows is the rows of a unit of work when Config.PartRows is 0:
// about a second of scoring on one core, and few enough parts that
// launching each costs little beside it.
const DefaultPartRows = 1 << 21

// Part is one unit of work: an input file, or the row groups
// [First, First+N) of a Parquet file (N = 0: the whole file), and the
// output file it is scored into.
type Part struct {
	Index      int // the part's place in the job's order of rows
	Path       string
	Root       string
	Rel        string
	Format     int // pipeline.Format
	PartKeys   []string
	PartValues []string // hive partition folders between Root and the file
	Size       int64
	First, N   int
	Rows       int64  // rows in the part; -1 when the format does not say
	Target     string // the output file
}

// input is the part's file as heft's pipeline opens it.
func (p Part) input() pipeline.Input {
	in := pipeline.Input{Path: p.Path, Root: p.Root, Rel: p.Rel, Format: pipeline.Format(p.Format), Size: p.Size}
	for i, k := range p.PartKeys {
		in.Partitions = append(in.Partitions, pipeline.Partition{Key: k, Value: p.PartValues[i]})
	}
	return in
}

// rowGroups is the part's range of row groups.
func (p Part) rowGroups() pipeline.RowGroupRange {
	return pipeline.RowGroupRange{First: p.First, N: p.N}
}

func (p Part) String() string {
	if p.N == 0 {
		return p.Path
	}
	return fmt.Sprintf("%s (%v)", p.Path, p.rowGroups())
}

// splitRowGroups groups consecutive row groups of the given sizes into
// ranges of at least partRows rows each (the last may hold fewer): the
// whole file, as one range with N = 0, when it holds no more than
// partRows.
func splitRowGroups(rows []int64, partRows int64) []pipeline.RowGroupRange {
	var total int64
	for _, n := range rows {
		total += n
	}
	if total <= partRows || len(rows) < 2 {
		return []pipeline.RowGroupRange{{}}
	}
	var out []pipeline.RowGroupRange
	cur := pipeline.RowGroupRange{}
	var sum int64
	for i, n := range rows {
		if cur.N == 0 {
			cur.First = i
		}
		cur.N++
		sum += n
		if sum >= partRows {
			out = append(out, cur)
			cur, sum = pipeline.RowGroupRange{}, 0
		}
	}
	if cur.N > 0 {
		out = append(out, cur)
	}
	return out
}

// partRel is the relative output path of the row groups r of the input at
// rel: rel itself for the whole file (the name heft score gives it), else
// rel's name with the range's first and last row group, zero-padded so that
// the part files of one input sort in the order of its rows:
// part-00001.parquet becomes part-00001-rg000004-000007.parquet.
func partRel(rel string, r pipeline.RowGroupRange) string {
	if r.All() {
		return rel
	}
	ext := filepath.Ext(rel)
	return fmt.Sprintf("%s-rg%06d-%06d%s", strings.TrimSuffix(rel, ext), r.First, r.First+r.N-1, ext)
}
