package aggregate

import "math"

// binaryTerms notes which of a batch's terms hold only 0 and 1 (one-hot
// levels and missing indicators are so by construction) and, for those, the
// rows where the term is 1. Sums over such a term need only those rows:
// Σ w·x is Σ w over the ones, and Σ x·q is Σ q over the ones, exactly as the
// dense sum (whose other products are 0) up to the order of additions.
// Detection looks at the values, so a term is treated as 0/1 only where it
// is, whatever its name.
type binaryTerms struct {
	is   []bool
	ones [][]int32 // per term: ascending rows with x = 1; valid where is[j]
	span [][2]int  // per term, its ones in all
	all  []int32
	tmp  []int32 // a whole batch's rows
}

// binaryChunk is how many rows are checked between looks at the result,
// so a numeric term is given up on after its first chunk.
const binaryChunk = 256

// zeroOne reports whether every x is 0 or 1: Σ|x(x−1)| is 0 exactly then,
// as no product of x ≠ 0, 1 with x−1 rounds to 0 (for tiny x it is −x, for
// x near 1 about x−1, which is exact), and a NaN or Inf makes the sum so.
func zeroOne(x []float64) bool {
	var s0, s1, s2, s3 float64
	i := 0
	for ; i+4 <= len(x); i += 4 {
		v0, v1, v2, v3 := x[i], x[i+1], x[i+2], x[i+3]
		s0 += math.Abs(v0 * (v0 - 1))
		s1 += math.Abs(v1 * (v1 - 1))
		s2 += math.Abs(v2 * (v2 - 1))
		s3 += math.Abs(v3 * (v3 - 1))
	}
	for ; i < len(x); i++ {
		s0 += math.Abs(x[i] * (x[i] - 1))
	}
	return s0+s1+s2+s3 == 0
}

// find fills bt for the first n rows of x.
func (bt *binaryTerms) find(x [][]float64, n int) {
	bt.none(len(x))
	bt.all = bt.all[:0]
	if cap(bt.tmp) < n {
		bt.tmp = make([]int32, n)
	}
	tmp := bt.tmp[:n]
	for j, col := range x {
		col = col[:n]
		if n == 0 || (col[0] != 0 && col[0] != 1) {
			continue
		}
		// chunk by chunk, so the ones are collected while the chunk is in
		// cache
		ok, k := true, 0
		for lo := 0; lo < n && ok; lo += binaryChunk {
			c := col[lo:min(lo+binaryChunk, n)]
			if ok = zeroOne(c); ok {
				// 1 has the lowest exponent bit set, ±0 not: branch-free
				for i, v := range c {
					tmp[k] = int32(lo + i)
					k += int(math.Float64bits(v) >> 52 & 1)
				}
			}
		}
		if !ok {
			continue
		}
		bt.is[j] = true
		bt.span[j] = [2]int{len(bt.all), len(bt.all) + k}
		bt.all = append(bt.all, tmp[:k]...)
	}
	for j, sp := range bt.span {
		if bt.is[j] {
			bt.ones[j] = bt.all[sp[0]:sp[1]]
		}
	}
}

// none marks every term as not 0/1, for callers that want the dense sums.
func (bt *binaryTerms) none(p int) {
	if len(bt.is) != p {
		bt.is = make([]bool, p)
		bt.ones = make([][]int32, p)
		bt.span = make([][2]int, p)
	}
	clear(bt.is)
	clear(bt.ones)
}

// binaryMoments are the moments of a 0/1 term from its count of ones c and
// their total weight s, given the arm's rows n and weight sw: with p = c/n,
// M2 = Σ(x − p)² = c(1−p)² + (n−c)p² = c(1−p), and with p_w = s/sw,
// M2_w = s(1−p_w), so the variances are n/(n−1)·p(1−p) and p_w(1−p_w).
func binaryMoments(n, c, sw, s float64) (u, wt Moments) {
	if n > 0 {
		m := c / n
		u = Moments{W: n, Mean: m, M2: max(c*(1-m), 0)}
	}
	if sw > 0 {
		m := s / sw
		wt = Moments{W: sw, Mean: m, M2: max(s*(1-m), 0)}
	}
	return u, wt
}
