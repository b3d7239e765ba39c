package pipeline

import (
	"fmt"

	"github.com/apache/arrow-go/v18/arrow"
)

// SameColumns requires the schema of path to have the column names and types
// of the first input's (path0, s0), in order: the files of one table. The
// error names path and the first column that differs.
func SameColumns(path0 string, s0 *arrow.Schema, path string, s *arrow.Schema) error {
	a, b := s0.Fields(), s.Fields()
	for k := range max(len(a), len(b)) {
		var why, col string
		switch {
		case k >= len(a):
			col, why = b[k].Name, "column not in the first input"
		case k >= len(b):
			col, why = a[k].Name, "column missing here"
		case a[k].Name != b[k].Name:
			col, why = b[k].Name, fmt.Sprintf("column %d is %q here but %q there", k+1, b[k].Name, a[k].Name)
		case !arrow.TypeEqual(a[k].Type, b[k].Type):
			col, why = b[k].Name, fmt.Sprintf("type %v here but %v there", b[k].Type, a[k].Type)
		default:
			continue
		}
		return &Error{File: path, RowGroup: -1, Row: -1, Column: col,
			Err: fmt.Errorf("schema differs from the first input %s: %s", path0, why)}
	}
	return nil
}
