package fit

import (
	"math"
	"slices"
	"sort"
)

// AUC is the c-statistic of score for the arms in t (1 treated, 0
// control; other values and NaN scores are skipped): the probability that
// a random treated row scores above a random control row, ties counted
// 1/2. It is the Mann–Whitney U of the treated over n1·n0 (Hanley & McNeil
// 1982), from mid-ranks after one sort, O(n log n). NaN when an arm is
// empty.
func AUC(score []float64, t []int8) float64 {
	type pt struct {
		s float64
		t int8
	}
	pts := make([]pt, 0, len(score))
	for i, s := range score {
		if i < len(t) && (t[i] == 0 || t[i] == 1) && !math.IsNaN(s) {
			pts = append(pts, pt{s, t[i]})
		}
	}
	slices.SortFunc(pts, func(a, b pt) int {
		switch {
		case a.s < b.s:
			return -1
		case a.s > b.s:
			return 1
		}
		return 0
	})
	var n1, n0 float64
	var rankSum float64 // of the treated, ranks from 1, mid-ranks for ties
	for i := 0; i < len(pts); {
		j := i
		var k1 float64
		for j < len(pts) && pts[j].s == pts[i].s {
			if pts[j].t == 1 {
				k1++
			}
			j++
		}
		mid := float64(i+1+j) / 2 // mean of ranks i+1..j
		rankSum += k1 * mid
		n1 += k1
		n0 += float64(j-i) - k1
		i = j
	}
	if n1 == 0 || n0 == 0 {
		return math.NaN()
	}
	u := rankSum - n1*(n1+1)/2
	return u / (n1 * n0)
}

// Quantiles returns the empirical quantiles of x at each q (clamped to
// [0, 1]) by linear interpolation between order statistics, Hyndman &
// Fan (1996) definition 7, numpy.quantile's default: with h = (n−1)q,
// Q = x_(⌊h⌋) + (h − ⌊h⌋)(x_(⌊h⌋+1) − x_(⌊h⌋)), 0-based order statistics.
// NaNs are ignored and x is not modified; nil when no value is left.
func Quantiles(x []float64, qs []float64) []Quantile {
	s := sortedFinite(x)
	if len(s) == 0 {
		return nil
	}
	out := make([]Quantile, len(qs))
	for k, q := range qs {
		out[k] = Quantile{Q: q, Value: quantileSorted(s, q)}
	}
	return out
}

func sortedFinite(x []float64) []float64 {
	s := make([]float64, 0, len(x))
	for _, v := range x {
		if !math.IsNaN(v) {
			s = append(s, v)
		}
	}
	slices.Sort(s)
	return s
}

// quantileSorted is definition 7 on sorted s, interpolating the way numpy
// does (from the upper neighbour when the fraction is ≥ 1/2) so results
// agree to the last bit in most cases.
func quantileSorted(s []float64, q float64) float64 {
	q = math.Min(math.Max(q, 0), 1)
	h := float64(len(s)-1) * q
	lo := math.Floor(h)
	i := int(lo)
	if i >= len(s)-1 {
		return s[len(s)-1]
	}
	t := h - lo
	a, b := s[i], s[i+1]
	if t >= 0.5 {
		return b - (b-a)*(1-t)
	}
	return a + (b-a)*t
}

// DecileEdges returns the distinct interior deciles of x, q = 0.1, …, 0.9
// (definition 7, as Quantiles), ascending; nil when x has no non-NaN value.
func DecileEdges(x []float64) []float64 {
	s := sortedFinite(x)
	if len(s) == 0 {
		return nil
	}
	out := make([]float64, 0, 9)
	for k := 1; k <= 9; k++ {
		v := quantileSorted(s, float64(k)/10)
		if len(out) == 0 || v > out[len(out)-1] {
			out = append(out, v)
		}
	}
	return out
}

// Histogram counts x in the bins [e_k, e_k+1), k = 0 … len(edges)−2, the
// last bin closed; values below e_0 go to the first bin and above the
// last edge to the last bin. NaNs are skipped. Edges must be ascending;
// nil when there are fewer than two.
func Histogram(x []float64, edges []float64) []float64 {
	nb := len(edges) - 1
	if nb < 1 {
		return nil
	}
	counts := make([]float64, nb)
	for _, v := range x {
		if math.IsNaN(v) {
			continue
		}
		// k = number of edges ≤ v, so v ∈ [e_(k−1), e_k).
		k := sort.Search(len(edges), func(i int) bool { return edges[i] > v })
		b := min(max(k-1, 0), nb-1)
		counts[b]++
	}
	return counts
}
