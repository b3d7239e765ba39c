package fit

import (
	"context"
	"fmt"
	"math"
	"runtime"
	"sync"
	"sync/atomic"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas64"
	"gonum.org/v1/gonum/floats"
	"gonum.org/v1/gonum/mat"
)

// Rows are processed in fixed chunks so that per-chunk partial sums, added
// in chunk order, give the same result whatever the number of goroutines
// or their scheduling. Within a chunk, blocks of blockRows rows are copied
// into a small row-major scratch for the rank-k update.
const (
	chunkRows = 16384
	blockRows = 512
)

// Defaults of GLMOptions.
const (
	defaultTol     = 1e-10
	defaultMaxIter = 100
)

// collinearTol bounds the smallest eigenvalue of the terms' correlation
// matrix, relative to the largest: below it the terms are taken as
// collinear (a condition number above 1e10 leaves the coefficients
// unidentified in practice). Common practice, no published source.
const collinearTol = 1e-10

// stdDesign is the design seen through the internal standardization
// z_j = (x_j − m_j)/s_j over the non-constant terms; nothing is copied.
// Coordinate 0 is the intercept, coordinate a ≥ 1 is term idx[a-1].
type stdDesign struct {
	n     int
	cols  [][]float64 // active original columns
	idx   []int       // their index in Design.Cols
	mean  []float64
	inv   []float64 // 1/s_j
	konst []int     // indices of constant terms in Design.Cols
	sd    []float64 // per Design column, 0 for constant ones
	means []float64 // per Design column
	// ranges holds per Design column min and max among y = 0, then among
	// y = 1 (logistic fits only).
	ranges [][4]float64
}

func (d *stdDesign) p() int { return 1 + len(d.cols) }

// checkInputs validates the shapes that a caller must get right and the
// row counts; errors about the data are *FitError values.
func checkInputs(X Design, y []float64, terms []string) error {
	if len(terms) != 1+len(X.Cols) {
		return fmt.Errorf("fit: %d term names for %d terms", len(terms), 1+len(X.Cols))
	}
	if len(y) != X.N {
		return fmt.Errorf("fit: outcome has %d rows, design has %d", len(y), X.N)
	}
	for j, c := range X.Cols {
		if len(c) != X.N {
			return fmt.Errorf("fit: term %q has %d rows, design has %d", terms[j+1], len(c), X.N)
		}
	}
	switch {
	case X.N == 0:
		return &FitError{Reason: ReasonNoRows}
	case X.N == 1:
		return &FitError{Reason: ReasonOneRow}
	case X.N < len(terms):
		return &FitError{Reason: ReasonTooFewRows, Detail: fmt.Sprintf("%d terms, %d rows", len(terms), X.N)}
	}
	for i, v := range y {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return &FitError{Reason: ReasonNonFinite, Detail: fmt.Sprintf("outcome is %v at row %d", v, i)}
		}
	}
	return nil
}

// standardize computes each term's mean and sample SD (two passes, for
// accuracy) and checks that every value is finite. With a 0/1 outcome y it
// also records each term's range per outcome class for the separation
// screen, in the same pass.
func standardize(ctx context.Context, X Design, terms []string, y []float64) (*stdDesign, error) {
	k := len(X.Cols)
	d := &stdDesign{n: X.N, sd: make([]float64, k), means: make([]float64, k)}
	if y != nil {
		d.ranges = make([][4]float64, k)
	}
	errs := make([]error, k)
	var next atomic.Int64
	var wg sync.WaitGroup
	for range min(runtime.GOMAXPROCS(0), max(k, 1)) {
		wg.Go(func() {
			for {
				j := int(next.Add(1) - 1)
				if j >= k || ctx.Err() != nil {
					return
				}
				var s float64
				lo := [2]float64{math.Inf(1), math.Inf(1)}
				hi := [2]float64{math.Inf(-1), math.Inf(-1)}
				for i, v := range X.Cols[j] {
					if math.IsNaN(v) || math.IsInf(v, 0) {
						errs[j] = &FitError{Reason: ReasonNonFinite, Terms: []string{terms[j+1]}, Detail: fmt.Sprintf("%v at row %d", v, i)}
						break
					}
					s += v
					if y != nil {
						c := int(y[i]) & 1
						if v < lo[c] {
							lo[c] = v
						}
						if v > hi[c] {
							hi[c] = v
						}
					}
				}
				if y != nil {
					d.ranges[j] = [4]float64{lo[0], hi[0], lo[1], hi[1]}
				}
				if errs[j] != nil {
					continue
				}
				m := s / float64(X.N)
				var ss, c float64
				for _, v := range X.Cols[j] {
					e := v - m
					ss += e * e
					c += e
				}
				// Corrected two-pass formula (Chan, Golub & LeVeque 1983).
				ss -= c * c / float64(X.N)
				d.means[j] = m + c/float64(X.N)
				if ss > 0 {
					d.sd[j] = math.Sqrt(ss / float64(X.N-1))
				}
			}
		})
	}
	wg.Wait()
	if err := ctx.Err(); err != nil {
		return nil, err
	}
	for _, e := range errs {
		if e != nil {
			return nil, e
		}
	}
	for j := range X.Cols {
		// A column is constant when its spread is at rounding level.
		if d.sd[j] == 0 || d.sd[j] <= 1e-13*math.Abs(d.means[j]) {
			d.sd[j] = 0
			d.konst = append(d.konst, j)
			continue
		}
		d.idx = append(d.idx, j)
		d.cols = append(d.cols, X.Cols[j])
		d.mean = append(d.mean, d.means[j])
		d.inv = append(d.inv, 1/d.sd[j])
	}
	return d, nil
}

// forChunks calls fn for every chunk of rows on GOMAXPROCS goroutines.
func forChunks(ctx context.Context, n int, fn func(c, lo, hi int, s *scratch)) error {
	nc := (n + chunkRows - 1) / chunkRows
	var next atomic.Int64
	var wg sync.WaitGroup
	for range min(runtime.GOMAXPROCS(0), nc) {
		wg.Go(func() {
			var s scratch
			for {
				c := int(next.Add(1) - 1)
				if c >= nc || ctx.Err() != nil {
					return
				}
				fn(c, c*chunkRows, min(n, (c+1)*chunkRows), &s)
			}
		})
	}
	wg.Wait()
	return ctx.Err()
}

// scratch is one goroutine's block buffers.
type scratch struct {
	s     []float64 // p × blockRows, row-major: row a holds sqrt(w_i)·z_ia
	sw, r []float64
}

func (s *scratch) ensure(p int) {
	if len(s.s) < p*blockRows {
		s.s = make([]float64, p*blockRows)
		s.sw = make([]float64, blockRows)
		s.r = make([]float64, blockRows)
	}
}

// crossprod holds Z'WZ and Z'r, with their per-chunk parts.
type crossprod struct {
	p      int
	chunkH [][]float64
	chunkG [][]float64
	chunkS []float64
	H      []float64 // p×p row-major, both triangles
	G      []float64
	S      float64 // the sum of fill's results
}

func newCrossprod(n, p int) *crossprod {
	nc := (n + chunkRows - 1) / chunkRows
	cp := &crossprod{p: p, chunkH: make([][]float64, nc), chunkG: make([][]float64, nc), chunkS: make([]float64, nc), H: make([]float64, p*p), G: make([]float64, p)}
	for c := range nc {
		cp.chunkH[c] = make([]float64, p*p)
		cp.chunkG[c] = make([]float64, p)
	}
	return cp
}

// fillFunc writes, for the block of rows lo..hi, the square root of each
// row's weight into sw and its working residual into r, and returns a
// per-row quantity summed over the rows (the log-likelihood) or 0. Row a
// of z (stride blockRows) already holds the standardized term z_a of the
// block for a = 1…p−1, so the linear predictor can be formed from it.
type fillFunc func(lo, hi int, z []float64, sw, r []float64) float64

// compute sets H = Σ w_i z_i z_iᵀ and G = Σ r_i z_i (z_i with the intercept
// 1 first), without materializing Z: per block, the rows z go into a
// p×blockRows scratch, are scaled by sqrt(w), and a symmetric rank-k
// update adds them to H.
func (cp *crossprod) compute(ctx context.Context, d *stdDesign, fill fillFunc) error {
	p := cp.p
	err := forChunks(ctx, d.n, func(c, lo, hi int, s *scratch) {
		s.ensure(p)
		H, G := cp.chunkH[c], cp.chunkG[c]
		clear(H)
		clear(G)
		var S float64
		for b := lo; b < hi; b += blockRows {
			e := min(hi, b+blockRows)
			m := e - b
			for a, col := range d.cols {
				x := col[b:e]
				mu, iv := d.mean[a], d.inv[a]
				row := s.s[(a+1)*blockRows:][:len(x)]
				for i, v := range x {
					row[i] = (v - mu) * iv
				}
			}
			sw, r := s.sw[:m], s.r[:m]
			S += fill(b, e, s.s, sw, r)
			G[0] += sum4(r)
			for a := 1; a < p; a++ {
				row := s.s[a*blockRows:][:m]
				G[a] += floats.Dot(row, r)
				for i := range row {
					row[i] *= sw[i]
				}
			}
			copy(s.s[:m], sw)
			blas64.Syrk(blas.NoTrans, 1,
				blas64.General{Rows: p, Cols: m, Stride: blockRows, Data: s.s},
				1, blas64.Symmetric{Uplo: blas.Upper, N: p, Stride: p, Data: H})
		}
		cp.chunkS[c] = S
	})
	if err != nil {
		return err
	}
	clear(cp.H)
	clear(cp.G)
	cp.S = 0
	for c := range cp.chunkH {
		cp.S += cp.chunkS[c]
		for i, v := range cp.chunkH[c] {
			cp.H[i] += v
		}
		for i, v := range cp.chunkG[c] {
			cp.G[i] += v
		}
	}
	for i := range p {
		for j := range i {
			cp.H[i*p+j] = cp.H[j*p+i]
		}
	}
	return nil
}

func sum4(x []float64) float64 {
	var s0, s1, s2, s3 float64
	i := 0
	for ; i+4 <= len(x); i += 4 {
		s0 += x[i]
		s1 += x[i+1]
		s2 += x[i+2]
		s3 += x[i+3]
	}
	for ; i < len(x); i++ {
		s0 += x[i]
	}
	return (s0 + s1) + (s2 + s3)
}

// collinear returns the coordinates (≥ 1) spanning near-null directions of
// the symmetric matrix H (p×p), judged on its correlation scaling, or nil.
func collinear(H []float64, p int) []int {
	c := mat.NewSymDense(p, nil)
	for i := range p {
		for j := i; j < p; j++ {
			den := math.Sqrt(H[i*p+i] * H[j*p+j])
			if den > 0 {
				c.SetSym(i, j, H[i*p+j]/den)
			}
		}
	}
	var es mat.EigenSym
	if !es.Factorize(c, true) {
		return nil
	}
	vals := es.Values(nil)
	var vecs mat.Dense
	es.VectorsTo(&vecs)
	top := vals[len(vals)-1]
	in := make([]bool, p)
	for k, v := range vals {
		if v > collinearTol*top {
			continue
		}
		for a := 1; a < p; a++ {
			if math.Abs(vecs.At(a, k)) > 1e-3 {
				in[a] = true
			}
		}
	}
	var out []int
	for a := 1; a < p; a++ {
		if in[a] {
			out = append(out, a)
		}
	}
	return out
}

// solve returns the solution of (H + λD) δ = g, D = diag(0, 1, …, 1), by
// Cholesky, and the factor for the inverse; ok is false when the matrix is
// not numerically positive definite.
func solve(H []float64, p int, lambda float64, g []float64) (delta []float64, ch *mat.Cholesky, ok bool) {
	s := mat.NewSymDense(p, nil)
	for i := range p {
		for j := i; j < p; j++ {
			s.SetSym(i, j, H[i*p+j])
		}
		if i > 0 {
			s.SetSym(i, i, H[i*p+i]+lambda)
		}
	}
	ch = new(mat.Cholesky)
	if !ch.Factorize(s) {
		return nil, nil, false
	}
	if ch.Cond() > 1e15 {
		return nil, nil, false
	}
	var x mat.VecDense
	if err := ch.SolveVecTo(&x, mat.NewVecDense(p, append([]float64(nil), g...))); err != nil {
		return nil, nil, false
	}
	return x.RawVector().Data, ch, true
}

// pseudoSolve solves H δ = g on the eigenvectors of H whose eigenvalues are
// above rounding level, for the steps taken while probing separation, where
// H is nearly singular.
func pseudoSolve(H []float64, p int, g []float64) []float64 {
	s := mat.NewSymDense(p, append([]float64(nil), H...))
	var es mat.EigenSym
	if !es.Factorize(s, true) {
		return nil
	}
	vals := es.Values(nil)
	var v mat.Dense
	es.VectorsTo(&v)
	top := vals[len(vals)-1]
	out := make([]float64, p)
	for k, lam := range vals {
		if lam <= 1e-14*top || lam <= 0 {
			continue
		}
		var dot float64
		for i := range p {
			dot += v.At(i, k) * g[i]
		}
		dot /= lam
		for i := range p {
			out[i] += dot * v.At(i, k)
		}
	}
	return out
}

// toOriginal maps standardized coefficients γ and their covariance Σ_γ to
// the original scale: β_j = γ_j/s_j, β_0 = γ_0 − Σ_j γ_j m_j/s_j, i.e.
// β = Aγ and Σ_β = A Σ_γ Aᵀ. Constant terms get coefficient and variance 0.
func (d *stdDesign) toOriginal(gamma, covG []float64, k int) (coef []float64, cov [][]float64) {
	p := d.p()
	pf := 1 + k
	// A is pf × p.
	A := make([]float64, pf*p)
	A[0] = 1
	for a := range d.cols {
		A[a+1] = -d.mean[a] * d.inv[a]
		A[(1+d.idx[a])*p+a+1] = d.inv[a]
	}
	coef = make([]float64, pf)
	for i := range pf {
		var s float64
		for a := range p {
			s += A[i*p+a] * gamma[a]
		}
		coef[i] = s
	}
	// T = A Σ_γ, then cov = T Aᵀ.
	T := make([]float64, pf*p)
	for i := range pf {
		for b := range p {
			var s float64
			for a := range p {
				s += A[i*p+a] * covG[a*p+b]
			}
			T[i*p+b] = s
		}
	}
	cov = make([][]float64, pf)
	for i := range pf {
		cov[i] = make([]float64, pf)
	}
	for i := range pf {
		for j := i; j < pf; j++ {
			var s float64
			for b := range p {
				s += T[i*p+b] * A[j*p+b]
			}
			cov[i][j], cov[j][i] = s, s
		}
	}
	return coef, cov
}

func seFromCov(cov [][]float64) []float64 {
	se := make([]float64, len(cov))
	for i := range cov {
		se[i] = math.Sqrt(math.Max(cov[i][i], 0))
	}
	return se
}

// inverse returns the inverse of the factorized matrix, row-major.
func inverse(ch *mat.Cholesky, p int) ([]float64, error) {
	var inv mat.SymDense
	if err := ch.InverseTo(&inv); err != nil {
		return nil, err
	}
	out := make([]float64, p*p)
	for i := range p {
		for j := range p {
			out[i*p+j] = inv.At(i, j)
		}
	}
	return out, nil
}

func termNames(terms []string, d *stdDesign, coords []int) []string {
	out := make([]string, 0, len(coords))
	for _, a := range coords {
		out = append(out, terms[1+d.idx[a-1]])
	}
	return out
}

func constantNames(terms []string, d *stdDesign) []string {
	out := make([]string, 0, len(d.konst))
	for _, j := range d.konst {
		out = append(out, terms[1+j])
	}
	return out
}

// LinearPredictor writes η_i = β_0 + Σ_j β_j X.Cols[j][i] into out, which
// must have length at least X.N.
func LinearPredictor(g *GLM, X Design, out []float64) {
	out = out[:X.N]
	for i := range out {
		out[i] = g.Coef[0]
	}
	for j, col := range X.Cols {
		b := g.Coef[j+1]
		if b == 0 {
			continue
		}
		for i, v := range col[:X.N] {
			out[i] += b * v
		}
	}
}
