package fit

import (
	"math"
	"slices"
	"sort"
	"sync"
)

// Exact order statistics without a full sort. A full sort of a 1M-row term
// costs O(n log n) only to read 18 of its order statistics; selection reads
// them in O(n).

// selectRanks reorders x so that x[r] holds the value a full ascending sort
// would put at r, for every r in ranks (ascending, each in [0, len(x))).
// It is Hoare's FIND generalized to several targets (Hoare 1961, "Algorithm
// 65: Find", CACM 4(7)): partition around a pivot, then recurse only into
// the sides that still hold a wanted rank, carrying those ranks along.
// Pivots come from a small sample at the wanted ranks' position, the
// partition is branch-free, and a pivot that is the range's minimum splits
// off its run of equal values, so ties end the recursion. Past a depth of
// 2·log2(n) a side is sorted instead, Musser's introselect bound (Musser
// 1997, "Introspective sorting and selection algorithms", Software:
// Practice and Experience 27(8)), so the worst case stays O(n log n).
// x must not hold NaN (design columns never do). Equal values are
// interchangeable, so the values read at the ranks are those of a sort,
// bit for bit, except that +0 and −0 compare equal and may trade places,
// as they may in any comparison sort.
func selectRanks(x []float64, ranks []int) {
	if len(ranks) == 0 || len(x) < 2 {
		return
	}
	depth := 2 * bitsLen(len(x))
	selectIn(x, 0, ranks, depth)
}

func bitsLen(n int) int {
	b := 0
	for ; n > 0; n >>= 1 {
		b++
	}
	return b
}

// selectIn works on x = the full slice's [off, off+len(x)), ranks relative
// to the full slice and all inside it.
func selectIn(x []float64, off int, ranks []int, depth int) {
	for len(ranks) > 0 {
		n := len(x)
		if n <= 16 || depth == 0 {
			slices.Sort(x)
			return
		}
		depth--
		p := pivotFor(x, ranks[len(ranks)/2]-off)
		// x[:lt] < p ≤ x[lt:]. When nothing is below p, p is the minimum:
		// split off the values equal to it instead, so every step shrinks
		// the range.
		lt := partitionLess(x, p)
		gt := lt
		if lt == 0 {
			gt = partitionAtMost(x, p) // x[:gt] == p < x[gt:]
		}
		i := sort.SearchInts(ranks, off+lt)
		j := sort.SearchInts(ranks, off+gt)
		left, right := ranks[:i], ranks[j:]
		switch {
		case len(left) == 0:
			x, off, ranks = x[gt:], off+gt, right
		case len(right) == 0:
			x, ranks = x[:lt], left
		default:
			// Recurse into the smaller side, loop on the larger.
			if lt < n-gt {
				selectIn(x[:lt], off, left, depth)
				x, off, ranks = x[gt:], off+gt, right
			} else {
				selectIn(x[gt:], off+gt, right, depth)
				x, ranks = x[:lt], left
			}
		}
	}
}

// pivotFor picks a pivot near the value of rank r of x: the order
// statistic at r's relative position in a sorted sample of 15 evenly
// spaced values (Floyd & Rivest 1975, "Algorithm 489: SELECT", CACM 18(3),
// take their pivots from a sample at the wanted rank's position), so one
// partition leaves r in a much smaller side than a median pivot would.
func pivotFor(x []float64, r int) float64 {
	const m = 15
	var smp [m]float64
	n := len(x)
	for k := range smp {
		smp[k] = x[k*(n-1)/(m-1)]
	}
	// Insertion sort: 15 values.
	for i := 1; i < m; i++ {
		for j := i; j > 0 && smp[j] < smp[j-1]; j-- {
			smp[j], smp[j-1] = smp[j-1], smp[j]
		}
	}
	return smp[r*(m-1)/(n-1)]
}

// partitionLess moves the values below p to the front and returns their
// count, without branches on the data: Lomuto's scheme written as two
// stores and a conditional increment, which the compiler turns into SETcc.
// Comparisons of random data are unpredictable, and the branchy form ran
// 9× slower on 1M normal values (1.6 ms against 14 ms, measured).
func partitionLess(x []float64, p float64) int {
	lt := 0
	for i, v := range x {
		x[i] = x[lt]
		x[lt] = v
		inc := 0
		if v < p {
			inc = 1
		}
		lt += inc
	}
	return lt
}

// partitionAtMost is partitionLess for the values ≤ p.
func partitionAtMost(x []float64, p float64) int {
	le := 0
	for i, v := range x {
		x[i] = x[le]
		x[le] = v
		inc := 0
		if v <= p {
			inc = 1
		}
		le += inc
	}
	return le
}

// type7At locates the definition-7 quantile q of n sorted values: it is
// s[n−1] when last, else interpolated between s[i] and s[i+1] by t (see
// quantileSorted).
func type7At(n int, q float64) (i int, t float64, last bool) {
	q = math.Min(math.Max(q, 0), 1)
	h := float64(n-1) * q
	lo := math.Floor(h)
	i = int(lo)
	if i >= n-1 {
		return n - 1, 0, true
	}
	return i, h - lo, false
}

// interp7 interpolates the way numpy does (from the upper neighbour when
// the fraction is ≥ 1/2) so results agree to the last bit in most cases.
func interp7(a, b, t float64) float64 {
	if t >= 0.5 {
		return b - (b-a)*(1-t)
	}
	return a + (b-a)*t
}

// ranksFor lists, ascending and without repeats, the order statistics the
// definition-7 quantiles qs of n values read.
func ranksFor(n int, qs []float64) []int {
	r := make([]int, 0, 2*len(qs))
	for _, q := range qs {
		i, _, last := type7At(n, q)
		r = append(r, i)
		if !last {
			r = append(r, i+1)
		}
	}
	slices.Sort(r)
	return slices.Compact(r)
}

// quantileBy is definition 7 with the order statistics read through at,
// which must agree with a sorted copy at the ranks ranksFor lists.
func quantileBy(n int, q float64, at func(int) float64) float64 {
	i, t, last := type7At(n, q)
	if last {
		return at(n - 1)
	}
	return interp7(at(i), at(i+1), t)
}

// decileQs are the q of the interior deciles.
var decileQs = [...]float64{0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.9}

// decilesBy is DecileEdges with the order statistics read through at.
func decilesBy(n int, at func(int) float64) []float64 {
	out := make([]float64, 0, 9)
	if n == 0 {
		return out
	}
	for k := 1; k <= 9; k++ {
		v := quantileBy(n, float64(k)/10, at)
		if len(out) == 0 || v > out[len(out)-1] {
			out = append(out, v)
		}
	}
	return out
}

// decilesSelect is DecileEdges of x without NaN, reordering x.
func decilesSelect(x []float64) []float64 {
	selectRanks(x, ranksFor(len(x), decileQs[:]))
	return decilesBy(len(x), func(r int) float64 { return x[r] })
}

// binaryOnes reports whether x holds only +0 and 1, and how many ones.
func binaryOnes(x []float64) (ones int, ok bool) {
	for _, v := range x {
		switch {
		case v == 1:
			ones++
		case math.Float64bits(v) != 0:
			return 0, false
		}
	}
	return ones, true
}

// decilesBinary is DecileEdges of n values of which the last ones (in
// sorted order) are 1 and the rest 0: the order statistics are known.
func decilesBinary(n, ones int) []float64 {
	return decilesBy(n, func(r int) float64 {
		if r < n-ones {
			return 0
		}
		return 1
	})
}

// mergedAt reads the order statistics at ranks (ascending) of the union of
// two ascending slices, in one merge walk.
func mergedAt(a, b []float64, ranks []int) map[int]float64 {
	out := make(map[int]float64, len(ranks))
	i, j := 0, 0
	for k := 0; len(ranks) > 0 && k < len(a)+len(b); k++ {
		var v float64
		if j >= len(b) || (i < len(a) && a[i] <= b[j]) {
			v = a[i]
			i++
		} else {
			v = b[j]
			j++
		}
		if k == ranks[0] {
			out[k] = v
			ranks = ranks[1:]
		}
	}
	return out
}

// SortedArms returns the ascending values of e for the rows with t = 1 and
// for those with t = 0 (other rows are left out), sorting the two arms
// concurrently; ok is false, and nothing is returned, when a value of
// either arm is NaN, −0 or outside [0, 1]. Propensities are never that, and
// for them the sort is a radix sort on the bit patterns, which order
// non-negative floats as their values do: the result is the same slice
// values a comparison sort gives, at a fraction of the cost.
func SortedArms(e []float64, t []int8) (e1, e0 []float64, ok bool) {
	n1, n0 := 0, 0
	for i, v := range e {
		if t[i] != 0 && t[i] != 1 {
			continue
		}
		if !(v >= 0 && v <= 1) || math.Signbit(v) {
			return nil, nil, false
		}
		n1 += int(t[i])
		n0 += 1 - int(t[i])
	}
	e1 = make([]float64, 0, n1)
	e0 = make([]float64, 0, n0)
	for i, v := range e {
		switch t[i] {
		case 1:
			e1 = append(e1, v)
		case 0:
			e0 = append(e0, v)
		}
	}
	buf := make([]float64, n1+n0)
	var wg sync.WaitGroup
	wg.Go(func() { radixSortNonNegative(e1, buf[:n1]) })
	radixSortNonNegative(e0, buf[n1:])
	wg.Wait()
	return e1, e0, true
}

// radixSortNonNegative sorts x, all +0 or positive and none NaN, by a
// least-significant-digit radix sort of the bit patterns in 11-bit digits
// (Knuth, TAOCP vol. 3, §5.2.5), skipping digits every value shares; buf
// is scratch as long as x.
func radixSortNonNegative(x, buf []float64) {
	const bits, size = 11, 1 << 11
	const digits = (64 + bits - 1) / bits
	if len(x) < 2 {
		return
	}
	counts := make([]int, digits*size)
	for _, v := range x {
		u := math.Float64bits(v)
		for d := range digits {
			counts[d*size+int(u>>(d*bits)&(size-1))]++
		}
	}
	first := math.Float64bits(x[0])
	src, dst := x, buf
	for d := range digits {
		c := counts[d*size : (d+1)*size]
		if c[first>>(d*bits)&(size-1)] == len(x) {
			continue // every value has this digit
		}
		off := 0
		for k, m := range c {
			c[k] = off
			off += m
		}
		shift := uint(d * bits)
		for _, v := range src {
			k := math.Float64bits(v) >> shift & (size - 1)
			dst[c[k]] = v
			c[k]++
		}
		src, dst = dst, src
	}
	if &src[0] != &x[0] {
		copy(x, src)
	}
}
