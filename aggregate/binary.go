package aggregate

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
	buf  [][]int32 // per term, capacity for a whole batch
}

// binaryChunk is how many rows are scanned between checks for a value other
// than 0 or 1, so a numeric term is given up on after its first chunk.
const binaryChunk = 64

// find fills bt for the first n rows of x.
func (bt *binaryTerms) find(x [][]float64, n int) {
	p := len(x)
	if len(bt.is) != p {
		bt.is = make([]bool, p)
		bt.ones = make([][]int32, p)
		bt.buf = make([][]int32, p)
	}
	for j, col := range x {
		bt.is[j], bt.ones[j] = false, nil
		col = col[:n]
		if n == 0 || (col[0] != 0 && col[0] != 1) {
			continue
		}
		if cap(bt.buf[j]) < n {
			bt.buf[j] = make([]int32, n)
		}
		buf := bt.buf[j][:n]
		k, bad := 0, 0
		for lo := 0; lo < n && bad == 0; lo += binaryChunk {
			hi := min(lo+binaryChunk, n)
			// branch-free: the row is written, and kept only if its value is 1
			for i, v := range col[lo:hi] {
				buf[k] = int32(lo + i)
				k += b2i(v == 1)
				bad += b2i(v != 0) & b2i(v != 1) // NaN too
			}
		}
		if bad == 0 {
			bt.is[j], bt.ones[j] = true, buf[:k]
		}
	}
}

// none marks every term as not 0/1, for callers that want the dense sums.
func (bt *binaryTerms) none(p int) {
	if len(bt.is) != p {
		bt.is = make([]bool, p)
		bt.ones = make([][]int32, p)
		bt.buf = make([][]int32, p)
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
