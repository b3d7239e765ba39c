package aggregate

import "fmt"

// topK is how many of the largest weights per arm the report lists.
const topK = 10

// Positivity thresholds on the propensity: shares of rows below eLow and
// above eHigh are reported (common practice, no single source).
const (
	eLow  = 0.01
	eHigh = 0.99
)

// overlap accumulates the propensity distribution per arm (0 control,
// 1 treated) on the model's fixed propensity edges, the rows near 0 and 1
// and the largest weights.
type overlap struct {
	// Counts[a][k] and Weighted[a][k] are the rows and Σw of arm a with
	// edges[k] ≤ e < edges[k+1] (the last bin closed); values outside the
	// edges fall into the first or last bin.
	Counts   [2][]int64 `json:"counts"`
	Weighted [2][]Sum   `json:"weighted"`
	Below    [2]int64   `json:"below"` // e < 0.01
	Above    [2]int64   `json:"above"` // e > 0.99
	// Top[a] holds arm a's largest weights in descending order, at most
	// topK. Keeping the k largest of each part and then the k largest of
	// their union gives exactly the k largest of the whole; equal weights
	// are interchangeable, so ties need no rule.
	Top [2][]float64 `json:"top_weights"`

	edges []float64
	guess binGuess
}

func newOverlap(edges []float64) *overlap {
	o := &overlap{edges: edges, guess: newBinGuess(edges)}
	nb := max(len(edges)-1, 0)
	for a := 0; a < 2; a++ {
		o.Counts[a] = make([]int64, nb)
		o.Weighted[a] = make([]Sum, nb)
		o.Top[a] = make([]float64, 0, topK)
	}
	return o
}

func (o *overlap) check() error {
	nb := max(len(o.edges)-1, 0)
	for a := 0; a < 2; a++ {
		if len(o.Counts[a]) != nb || len(o.Weighted[a]) != nb {
			return fmt.Errorf("overlap histogram has %d bins, the model %d", len(o.Counts[a]), nb)
		}
		if len(o.Top[a]) > topK {
			return fmt.Errorf("overlap keeps %d top weights, at most %d", len(o.Top[a]), topK)
		}
	}
	return nil
}

// histBin is the bin of x on sorted edges in the convention of Counts: the
// largest k with edges[k] ≤ x, clamped to [0, len(edges)−2]. A binary search.
func histBin(edges []float64, x float64) int {
	lo, hi := 0, len(edges) // first index with edges[i] > x lies in [lo, hi]
	for lo < hi {
		m := int(uint(lo+hi) >> 1)
		if edges[m] <= x {
			lo = m + 1
		} else {
			hi = m
		}
	}
	k := lo - 1
	if k > len(edges)-2 {
		k = len(edges) - 2
	}
	if k < 0 {
		k = 0
	}
	return k
}

// binGuess finds histBin's bin by a first guess that is right for evenly
// spaced edges (the model's propensity edges are), then steps to the exact
// bin, so uneven edges only cost more steps.
type binGuess struct {
	lo, scale float64
	last      int // the last bin
}

func newBinGuess(edges []float64) binGuess {
	g := binGuess{last: len(edges) - 2}
	if len(edges) >= 2 {
		if span := edges[len(edges)-1] - edges[0]; span > 0 {
			g.lo, g.scale = edges[0], float64(len(edges)-1)/span
		}
	}
	return g
}

// bin is histBin(edges, x) for the edges g was made from.
func (g *binGuess) bin(edges []float64, x float64) int {
	f := (x - g.lo) * g.scale
	if !(f >= 0) { // also NaN
		f = 0
	}
	if f > float64(g.last) {
		f = float64(g.last)
	}
	k := int(f)
	for k < g.last && edges[k+1] <= x {
		k++
	}
	for k > 0 && edges[k] > x {
		k--
	}
	return k
}

// add folds in one batch: e propensities, rows and w as for armMoments;
// hist is scratch of at least the number of bins.
func (o *overlap) add(e []float64, rows *arms, w []float64, hist []float64) {
	nb := len(o.Counts[0])
	for a, idx := range rows {
		h := hist[:nb]
		clear(h)
		counts := o.Counts[a]
		var below, above int64
		top := o.Top[a]
		for _, i := range idx {
			ei := e[i]
			if ei < eLow {
				below++
			} else if ei > eHigh {
				above++
			}
			if nb > 0 {
				k := o.guess.bin(o.edges, ei)
				counts[k]++
				h[k] += w[i]
			}
			if wi := w[i]; len(top) < topK || wi > top[len(top)-1] {
				top = pushTop(top, wi)
			}
		}
		o.Top[a] = top
		o.Below[a] += below
		o.Above[a] += above
		for k, v := range h {
			o.Weighted[a][k].Add(v)
		}
	}
}

// pushTop inserts w into the descending slice top, dropping the smallest
// beyond topK. top has capacity topK, so this does not allocate.
func pushTop(top []float64, w float64) []float64 {
	if len(top) < topK {
		top = append(top, w)
	} else {
		top[len(top)-1] = w
	}
	for i := len(top) - 1; i > 0 && top[i] > top[i-1]; i-- {
		top[i], top[i-1] = top[i-1], top[i]
	}
	return top
}

func (o *overlap) merge(p *overlap) {
	for a := 0; a < 2; a++ {
		for k := range o.Counts[a] {
			o.Counts[a][k] += p.Counts[a][k]
			o.Weighted[a][k].Merge(p.Weighted[a][k])
		}
		o.Below[a] += p.Below[a]
		o.Above[a] += p.Above[a]
		for _, w := range p.Top[a] {
			if top := o.Top[a]; len(top) < topK || w > top[len(top)-1] {
				o.Top[a] = pushTop(top, w)
			}
		}
	}
}
