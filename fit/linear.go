package fit

import (
	"context"
	"fmt"
	"math"
)

// FitLinear fits y = β0 + Σ_j β_j x_j by least squares: the normal
// equations Z'Z γ = Z'y on the internally standardized terms (see
// FitLogistic), solved by Cholesky after a rank check of Z'Z, then mapped
// back to the original scale exactly.
//
// Cov = Scale·A (Z'Z)⁻¹ Aᵀ with Scale = RSS/(n−p), p the number of
// coefficients. Deviance is the RSS and LogLik the normal log-likelihood at
// the maximum-likelihood variance RSS/n:
//
//	ℓ = −(n/2)·(log(2π·RSS/n) + 1)
//
// (what statsmodels reports as OLS llf). With opt.Ridge = λ > 0 it
// minimizes RSS/2 + (λ/2) Σ_{j≥1} (s_j β_j)² and Cov uses (Z'Z + λD)⁻¹;
// collinear terms are then a warning, not an error.
func FitLinear(ctx context.Context, X Design, y []float64, terms []string, opt GLMOptions) (*GLM, error) {
	if err := checkInputs(X, y, terms); err != nil {
		return nil, err
	}
	lambda := opt.Ridge
	if lambda < 0 || math.IsNaN(lambda) || math.IsInf(lambda, 0) {
		return nil, fmt.Errorf("fit: ridge penalty %v must be a finite number ≥ 0", lambda)
	}
	tol := opt.Tol
	if tol <= 0 {
		tol = defaultTol
	}
	d, err := standardize(ctx, X, terms, nil)
	if err != nil {
		return nil, err
	}
	g := &GLM{Family: FamilyGaussian, Terms: append([]string(nil), terms...), N: X.N, Tol: tol, Ridge: lambda}
	if len(d.konst) > 0 {
		names := constantNames(terms, d)
		if lambda == 0 {
			return nil, &FitError{Reason: ReasonCollinear, Terms: names, Detail: "constant in the sample, collinear with the intercept"}
		}
		g.Warnings = append(g.Warnings, fmt.Sprintf("constant terms %q: coefficient fixed at 0", names))
	}
	p := d.p()
	n := X.N
	if n <= p {
		return nil, &FitError{Reason: ReasonNoResidualDF, Detail: fmt.Sprintf("%d coefficients, %d rows", p, n)}
	}
	// Centre y too, so that Z'y carries no large common part.
	var ym float64
	for _, v := range y {
		ym += v
	}
	ym /= float64(n)
	cp := newCrossprod(n, p)
	err = cp.compute(ctx, d, func(lo, hi int, _, sw, r []float64) float64 {
		for i := range sw {
			sw[i] = 1
			r[i] = y[lo+i] - ym
		}
		return 0
	})
	if err != nil {
		return nil, err
	}
	if coll := collinear(cp.H, p); len(coll) > 0 {
		names := termNames(terms, d, coll)
		if lambda == 0 {
			return nil, &FitError{Reason: ReasonCollinear, Terms: names, Detail: "a linear combination of them is constant"}
		}
		g.Warnings = append(g.Warnings, fmt.Sprintf("collinear terms %q: identified by the ridge penalty only", names))
	}
	gamma, ch, ok := solve(cp.H, p, lambda, cp.G)
	if !ok {
		return nil, &FitError{Reason: ReasonSingular, Detail: "X'X is not numerically positive definite"}
	}
	gamma[0] += ym
	// RSS from the residuals, not from y'y − γ'Z'y, to avoid cancellation.
	parts := make([]float64, (n+chunkRows-1)/chunkRows)
	err = forChunks(ctx, n, func(c, lo, hi int, s *scratch) {
		s.ensure(1)
		var rss float64
		for b := lo; b < hi; b += blockRows {
			e := min(hi, b+blockRows)
			buf := s.r[:e-b]
			d.linearPredictorInto(gamma, b, e, buf)
			for i, v := range buf {
				res := y[b+i] - v
				rss += res * res
			}
		}
		parts[c] = rss
	})
	if err != nil {
		return nil, err
	}
	var rss float64
	for _, v := range parts {
		rss += v
	}
	covG, err := inverse(ch, p)
	if err != nil {
		return nil, &FitError{Reason: ReasonSingular, Detail: err.Error()}
	}
	g.Scale = rss / float64(n-p)
	for i := range covG {
		covG[i] *= g.Scale
	}
	g.Coef, g.Cov = d.toOriginal(gamma, covG, len(X.Cols))
	g.SE = seFromCov(g.Cov)
	g.Deviance = rss
	if rss > 0 {
		g.LogLik = -float64(n) / 2 * (math.Log(2*math.Pi*rss/float64(n)) + 1)
	} else {
		// The likelihood is unbounded; 0 keeps the model file valid JSON.
		g.Warnings = append(g.Warnings, "the terms fit the outcome exactly (RSS = 0): log-likelihood is unbounded and reported as 0")
	}
	g.Iterations = 1
	g.Converged = true
	return g, nil
}

// linearPredictorInto writes η for rows lo..hi (at most blockRows) into
// out[0:hi−lo].
func (d *stdDesign) linearPredictorInto(gamma []float64, lo, hi int, out []float64) {
	for i := range out {
		out[i] = gamma[0]
	}
	for a, col := range d.cols {
		c := gamma[a+1] * d.inv[a]
		if c == 0 {
			continue
		}
		mu := d.mean[a]
		for i, v := range col[lo:hi] {
			out[i] += c * (v - mu)
		}
	}
}
