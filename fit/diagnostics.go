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
// 1982), from mid-ranks after sorting each arm, O(n log n). NaN when an arm
// is empty.
func AUC(score []float64, t []int8) float64 {
	var s1, s0 []float64
	for i, s := range score {
		if i < len(t) && !math.IsNaN(s) {
			switch t[i] {
			case 1:
				s1 = append(s1, s)
			case 0:
				s0 = append(s0, s)
			}
		}
	}
	slices.Sort(s1)
	slices.Sort(s0)
	return aucSorted(s1, s0)
}

// aucSorted is AUC from the ascending scores of each arm (no NaN): the
// merge of the two gives the pooled order, and the treated rank sum is
// taken over its tie groups with mid-ranks.
func aucSorted(s1, s0 []float64) float64 {
	var n1, n0 float64
	var rankSum float64 // of the treated, ranks from 1, mid-ranks for ties
	a, b := 0, 0
	for a < len(s1) || b < len(s0) {
		v := math.Inf(1)
		if a < len(s1) {
			v = s1[a]
		}
		if b < len(s0) && (a >= len(s1) || s0[b] < v) {
			v = s0[b]
		}
		i := a + b
		a0 := a
		for a < len(s1) && s1[a] == v {
			a++
		}
		for b < len(s0) && s0[b] == v {
			b++
		}
		j := a + b
		k1 := float64(a - a0)
		mid := float64(i+1+j) / 2 // mean of ranks i+1..j
		rankSum += k1 * mid
		n1 += k1
		n0 += float64(j-i) - k1
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
	s := finite(x)
	if len(s) == 0 {
		return nil
	}
	selectRanks(s, ranksFor(len(s), qs))
	out := make([]Quantile, len(qs))
	at := func(r int) float64 { return s[r] }
	for k, q := range qs {
		out[k] = Quantile{Q: q, Value: quantileBy(len(s), q, at)}
	}
	return out
}

// QuantilesSorted is Quantiles of s already sorted ascending without NaN,
// sparing the copy; nil when s is empty.
func QuantilesSorted(s []float64, qs []float64) []Quantile {
	if len(s) == 0 {
		return nil
	}
	out := make([]Quantile, len(qs))
	for k, q := range qs {
		out[k] = Quantile{Q: q, Value: quantileSorted(s, q)}
	}
	return out
}

// finite is a copy of x without its NaNs.
func finite(x []float64) []float64 {
	s := make([]float64, 0, len(x))
	for _, v := range x {
		if !math.IsNaN(v) {
			s = append(s, v)
		}
	}
	return s
}

// quantileSorted is definition 7 on sorted s, interpolating the way numpy
// does (from the upper neighbour when the fraction is ≥ 1/2) so results
// agree to the last bit in most cases.
func quantileSorted(s []float64, q float64) float64 {
	i, t, last := type7At(len(s), q)
	if last {
		return s[len(s)-1]
	}
	return interp7(s[i], s[i+1], t)
}

// DecileEdges returns the distinct interior deciles of x, q = 0.1, …, 0.9
// (definition 7, as Quantiles), ascending; nil when x has no non-NaN value.
func DecileEdges(x []float64) []float64 {
	s := finite(x)
	if len(s) == 0 {
		return nil
	}
	return decilesSelect(s)
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

// histogramSorted is Histogram of the union of ascending slices without
// NaN, by binary search per edge rather than per value: with edges
// ascending, the number of edges ≤ v is at least m exactly when
// v ≥ e_(m−1).
func histogramSorted(edges []float64, parts ...[]float64) []float64 {
	nb := len(edges) - 1
	if nb < 1 {
		return nil
	}
	counts := make([]float64, nb)
	for _, s := range parts {
		// ge(m) = #{v: at least m edges ≤ v}; ge(0) = len(s).
		prev := len(s)
		for m := 1; m <= len(edges)+1; m++ {
			ge := 0
			if m <= len(edges) {
				ge = len(s) - sort.SearchFloat64s(s, edges[m-1])
			}
			k := m - 1 // prev − ge values have exactly k edges ≤ v
			b := min(max(k-1, 0), nb-1)
			counts[b] += float64(prev - ge)
			prev = ge
		}
	}
	return counts
}
