package fit

import (
	"errors"
	"fmt"
	"strings"
	"testing"

	"github.com/apache/arrow-go/v18/arrow"

	"github.com/heft-project/heft/pipeline"
)

// A categorical column none of whose levels reaches the minimum count is
// refused with its cause rather than fitted into a separation: a numeric
// column read as text because of one stray word is located at that word.
func TestAllLevelsRare(t *testing.T) {
	n := 40
	tr, num, ids := make([]any, n), make([]any, n), make([]any, n)
	for i := range n {
		tr[i] = i % 2
		num[i] = fmt.Sprint(float64(i) / 4)
		ids[i] = fmt.Sprintf("id-%d", i)
	}
	num[17] = "n/a?"
	opt := SampleOptions{Treatment: "t", Covariates: []string{"x"}}
	cases := []struct {
		name string
		x    []any
		row  int64
		want string
	}{
		{"numbers and one word", num, 17, `"n/a?", here, a stray word in a numeric column`},
		{"an identifier", ids, -1, "lower the minimum level count"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			fr := frameOf(t, opt, col{"t", arrow.PrimitiveTypes.Int64, tr}, col{"x", arrow.BinaryTypes.String, c.x})
			_, _, _, err := Fit(t.Context(), fr, Options{SampleOptions: opt})
			var pe *pipeline.Error
			if !errors.As(err, &pe) || pe.Column != "x" || pe.Row != c.row || !strings.Contains(err.Error(), c.want) {
				t.Fatalf("got %v, want column x, row %d, %q", err, c.row, c.want)
			}
			if !strings.Contains(err.Error(), "40 distinct values in 40 rows") {
				t.Errorf("%v does not give the counts", err)
			}
		})
	}
}
