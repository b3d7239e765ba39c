package fit

import (
	"context"
	"fmt"
	"math"

	"gonum.org/v1/gonum/floats"
)

// Separation probing: rows whose fitted probability is this close to their
// own outcome (|η| above the bound, on the right side) are candidates for
// separation (1/(1+e^10) ≈ 4.5e-5) or are counted as fitted at the
// boundary (1/(1+e^15) ≈ 3e-7). Common practice, no published source.
const (
	candidateEta = 10
	boundaryEta  = 15
	probeSteps   = 40
	probeStepTol = 1e-8 // a converged step is this small in standardized units
	divergeStep  = 1e-3 // a step along a diverging direction is larger
)

// FitLogistic fits P(y=1|x) = 1/(1+exp(−(β0 + Σ_j β_j x_j))) by
// Newton–Raphson, which for the canonical logit link is iteratively
// reweighted least squares (McCullagh & Nelder, Generalized Linear Models,
// 2nd ed. 1989, ch. 2 and 4).
//
// The terms are standardized internally, z_j = (x_j − m_j)/s_j with s_j
// the sample SD, and the fit runs on z. With opt.Ridge = λ > 0 it
// maximizes the penalized log-likelihood
//
//	ℓ(β) − (λ/2) Σ_{j≥1} (s_j β_j)²
//
// (a ridge on the standardized coefficients γ_j = s_j β_j; the intercept
// is not penalized). Each step solves (Z'WZ + λD) δ = Z'(y−μ) − λDγ by
// Cholesky, W = diag(μ(1−μ)), D = diag(0,1,…,1), and is halved while the
// penalized deviance −2ℓ + λΣγ_j² increases. Iteration stops when the
// penalized deviance changes by less than opt.Tol relative to
// |deviance| + 0.1, or after opt.MaxIter steps.
//
// Coefficients are mapped back to the original scale exactly, and Cov is
// the inverse observed (penalized) information A (Z'WZ + λD)⁻¹ Aᵀ at the
// optimum, A the linear map from γ to β. LogLik and Deviance (= −2 LogLik)
// are unpenalized.
//
// Without ridge, complete or quasi-complete separation and collinear or
// constant terms are *FitError values naming the terms: separation by one
// term is found before iterating, separation by a combination of terms
// from the rows fitted at 0/1 and the diverging Newton steps (see
// probeSeparation); collinearity from the eigenvalues of the terms'
// correlation matrix. With ridge the model is fitted anyway and the
// problem is recorded in Warnings (a constant term then gets coefficient
// 0); separation is then only seen when one term alone separates.
func FitLogistic(ctx context.Context, X Design, y []float64, terms []string, opt GLMOptions) (*GLM, error) {
	return fitLogistic(ctx, X, y, terms, opt, true)
}

// fitLogistic is FitLogistic; screen=false skips the one-term separation
// screen so that tests reach the detection after Newton's method.
func fitLogistic(ctx context.Context, X Design, y []float64, terms []string, opt GLMOptions, screen bool) (*GLM, error) {
	if err := checkInputs(X, y, terms); err != nil {
		return nil, err
	}
	var n1 int
	for i, v := range y {
		switch v {
		case 1:
			n1++
		case 0:
		default:
			return nil, &FitError{Reason: ReasonNotBinary, Detail: fmt.Sprintf("%v at row %d", v, i)}
		}
	}
	if n1 == 0 || n1 == X.N {
		return nil, &FitError{Reason: ReasonNoVariation, Detail: fmt.Sprintf("all %d rows are %v", X.N, y[0])}
	}
	tol, maxIter := opt.Tol, opt.MaxIter
	if tol <= 0 {
		tol = defaultTol
	}
	if maxIter <= 0 {
		maxIter = defaultMaxIter
	}
	lambda := opt.Ridge
	if lambda < 0 || math.IsNaN(lambda) || math.IsInf(lambda, 0) {
		return nil, fmt.Errorf("fit: ridge penalty %v must be a finite number ≥ 0", lambda)
	}
	d, err := standardize(ctx, X, terms, y)
	if err != nil {
		return nil, err
	}
	g := &GLM{Family: FamilyBinomial, Terms: append([]string(nil), terms...), N: X.N, Tol: tol, Ridge: lambda}
	if len(d.konst) > 0 {
		names := constantNames(terms, d)
		if lambda == 0 {
			return nil, &FitError{Reason: ReasonCollinear, Terms: names, Detail: "constant in the sample, collinear with the intercept"}
		}
		g.Warnings = append(g.Warnings, fmt.Sprintf("constant terms %q: coefficient fixed at 0", names))
	}
	if screen {
		if reason, names := screenSeparation(d, terms); reason != "" {
			if lambda == 0 {
				return nil, &FitError{Reason: reason, Terms: names, Detail: "the fitted probabilities would reach 0 or 1 and the coefficients diverge"}
			}
			g.Warnings = append(g.Warnings, fmt.Sprintf("%s by %q: coefficients are held finite by the ridge penalty only", reason, names))
		}
	}

	p := d.p()
	n := X.N
	nw := &newton{ctx: ctx, d: d, y: y, lambda: lambda,
		gamma: make([]float64, p), trial: make([]float64, p), grad: make([]float64, p),
		eta: make([]float64, n), etaTrial: make([]float64, n),
		cp: newCrossprod(n, p), cpTrial: newCrossprod(n, p)}
	ybar := float64(n1) / float64(n)
	nw.gamma[0] = math.Log(ybar / (1 - ybar))
	ll, err := nw.eval(nw.gamma, nw.eta, nw.cp)
	if err != nil {
		return nil, err
	}
	nw.ll, nw.pdev = ll, penDev(ll, nw.gamma, lambda)
	// Here μ is constant, so Z'WZ ∝ Z'Z: an exact collinearity check.
	if coll := collinear(nw.cp.H, p); len(coll) > 0 {
		names := termNames(terms, d, coll)
		if lambda == 0 {
			return nil, &FitError{Reason: ReasonCollinear, Terms: names, Detail: "a linear combination of them is constant"}
		}
		g.Warnings = append(g.Warnings, fmt.Sprintf("collinear terms %q: identified by the ridge penalty only", names))
	}

	singular := false
	for g.Iterations < maxIter {
		if err := ctx.Err(); err != nil {
			return nil, err
		}
		delta, _, ok := solve(nw.cp.H, p, lambda, nw.gradient())
		if !ok {
			singular = true
			break
		}
		g.Iterations++
		before := nw.pdev
		_, ok, err := nw.step(delta)
		if err != nil {
			return nil, err
		}
		if !ok {
			// No step lowers the deviance: the optimum to rounding.
			g.Converged = true
			break
		}
		if math.Abs(before-nw.pdev)/(math.Abs(nw.pdev)+0.1) < tol {
			g.Converged = true
			break
		}
	}

	if lambda == 0 {
		if ferr, err := probeSeparation(nw, terms, singular); err != nil {
			return nil, err
		} else if ferr != nil {
			return nil, ferr
		}
	}
	// nw.cp holds Z'WZ at the final coefficients.
	_, ch, ok := solve(nw.cp.H, p, lambda, nw.cp.G)
	if !ok {
		return nil, &FitError{Reason: ReasonSingular, Detail: "the information matrix at the fitted coefficients is not positive definite"}
	}
	covG, err := inverse(ch, p)
	if err != nil {
		return nil, &FitError{Reason: ReasonSingular, Detail: err.Error()}
	}
	g.Coef, g.Cov = d.toOriginal(nw.gamma, covG, len(X.Cols))
	g.SE = seFromCov(g.Cov)
	g.LogLik = nw.ll
	g.Deviance = -2 * nw.ll
	if !g.Converged {
		g.Warnings = append(g.Warnings, fmt.Sprintf("did not converge in %d iterations", g.Iterations))
	}
	return g, nil
}

// probeSeparation decides, after Newton's method, whether coefficients
// diverge. When rows are fitted near their own outcome it takes more
// Newton steps: at a finite optimum they shrink quadratically, under
// separation they keep their size along the diverging direction. Rows
// then fitted within 3e-7 of 0/1 are the separated ones: with all rows
// among them the separation is complete; otherwise the other rows leave a
// direction unidentified (the null space of their Z'Z), which names the
// terms. It returns a *FitError for separation, else nil.
func probeSeparation(nw *newton, terms []string, singular bool) (*FitError, error) {
	d, y := nw.d, nw.y
	if countBoundary(nw.eta, y, candidateEta) == 0 {
		if singular {
			return &FitError{Reason: ReasonSingular, Detail: "the information matrix became singular during the fit"}, nil
		}
		return nil, nil
	}
	p := d.p()
	var last []float64
	diverging := false
	before := make([]float64, d.n)
	for range probeSteps {
		copy(before, nw.eta)
		delta, _, ok := solve(nw.cp.H, p, 0, nw.gradient())
		if !ok {
			delta = pseudoSolve(nw.cp.H, p, nw.gradient())
		}
		if delta == nil {
			break
		}
		taken, ok, err := nw.step(delta)
		if err != nil {
			return nil, err
		}
		if !ok {
			break
		}
		last = taken
		big := 0.0
		for _, v := range taken {
			big = math.Max(big, math.Abs(v))
		}
		// At a finite optimum the steps shrink quadratically; along a
		// diverging direction they keep a size of order one.
		diverging = big >= divergeStep
		if big < probeStepTol {
			break
		}
		if !diverging {
			continue
		}
		// Stop once the rows short of the boundary have stopped moving:
		// what remains is the finite part of the fit.
		moving := false
		for i, v := range nw.eta {
			if !atBoundary(v, y[i], boundaryEta) && math.Abs(v-before[i]) > 1e-3 {
				moving = true
				break
			}
		}
		if !moving {
			break
		}
	}
	eta := nw.eta
	nb := countBoundary(eta, y, boundaryEta)
	var null []int
	if nb > 0 && nb < d.n {
		// Z'Z over the rows not at the boundary.
		unit := func(lo, hi int, _, sw, r []float64) float64 {
			for i := range sw {
				if atBoundary(eta[lo+i], y[lo+i], boundaryEta) {
					sw[i] = 0
				} else {
					sw[i] = 1
				}
				r[i] = 0
			}
			return 0
		}
		m := newCrossprod(d.n, p)
		if err := m.compute(nw.ctx, d, unit); err != nil {
			return nil, err
		}
		null = collinear(m.H, p)
	}
	if !diverging && len(null) == 0 && nb != d.n {
		if singular {
			return &FitError{Reason: ReasonSingular, Detail: "the information matrix became singular during the fit"}, nil
		}
		return nil, nil
	}
	reason := ReasonQuasiCompleteSeparation
	if nb == d.n {
		reason = ReasonCompleteSeparation
	}
	coords := null
	if len(coords) == 0 && last != nil {
		coords = largest(last, 1e-3)
	}
	return &FitError{Reason: reason, Terms: termNames(terms, d, coords),
		Detail: fmt.Sprintf("%d of %d rows are fitted within 3e-7 of their outcome and the coefficients diverge", nb, d.n)}, nil
}

// newton is the state of the Newton iteration: coefficients, their linear
// predictor, log-likelihood and Z'WZ, Z'(y−μ), with spare buffers for a
// trial point so that a rejected step costs no copying.
type newton struct {
	ctx           context.Context
	d             *stdDesign
	y             []float64
	lambda        float64
	gamma, trial  []float64
	eta, etaTrial []float64
	cp, cpTrial   *crossprod
	ll, pdev      float64
	grad          []float64
}

// eval computes, in one pass over the rows, η at gamma (into eta), the
// log-likelihood, and the weighted cross products at that point (into cp).
func (nw *newton) eval(gamma, eta []float64, cp *crossprod) (float64, error) {
	d, y := nw.d, nw.y
	err := cp.compute(nw.ctx, d, func(lo, hi int, z, sw, r []float64) float64 {
		e := eta[lo:hi]
		for i := range e {
			e[i] = gamma[0]
		}
		for a := 1; a < len(gamma); a++ {
			if gamma[a] != 0 {
				floats.AddScaled(e, gamma[a], z[a*blockRows:][:len(e)])
			}
		}
		var s float64
		for i, v := range e {
			mu, q := logistic(v)
			sw[i] = math.Sqrt(mu * q)
			// The log of the observed outcome's probability, which
			// logistic gives to full relative precision.
			if y[lo+i] == 1 {
				r[i] = q
				s += math.Log(mu)
			} else {
				r[i] = -mu
				s += math.Log(q)
			}
		}
		return s
	})
	return cp.S, err
}

// gradient is Z'(y−μ) − λDγ at the current point.
func (nw *newton) gradient() []float64 {
	for a, v := range nw.cp.G {
		nw.grad[a] = v
		if a > 0 {
			nw.grad[a] -= nw.lambda * nw.gamma[a]
		}
	}
	return nw.grad
}

// step moves along delta, halving it while the penalized deviance would
// increase; it returns the step taken, or ok = false when no step of at
// least 2^−60·delta lowers the deviance.
func (nw *newton) step(delta []float64) (taken []float64, ok bool, err error) {
	t := 1.0
	for range 60 {
		for a := range delta {
			nw.trial[a] = nw.gamma[a] + t*delta[a]
		}
		ll, err := nw.eval(nw.trial, nw.etaTrial, nw.cpTrial)
		if err != nil {
			return nil, false, err
		}
		if pd := penDev(ll, nw.trial, nw.lambda); pd <= nw.pdev {
			taken = make([]float64, len(delta))
			for a := range delta {
				taken[a] = t * delta[a]
			}
			nw.gamma, nw.trial = nw.trial, nw.gamma
			nw.eta, nw.etaTrial = nw.etaTrial, nw.eta
			nw.cp, nw.cpTrial = nw.cpTrial, nw.cp
			nw.ll, nw.pdev = ll, pd
			return taken, true, nil
		}
		t /= 2
	}
	return nil, false, nil
}

// largest returns the coordinates a ≥ 1 with |v_a| > rel·max_b≥1 |v_b|.
func largest(v []float64, rel float64) []int {
	top := 0.0
	for _, x := range v[1:] {
		top = math.Max(top, math.Abs(x))
	}
	var out []int
	for a := 1; a < len(v); a++ {
		if top > 0 && math.Abs(v[a]) > rel*top {
			out = append(out, a)
		}
	}
	return out
}

func countBoundary(eta, y []float64, bound float64) int {
	n := 0
	for i, e := range eta {
		if atBoundary(e, y[i], bound) {
			n++
		}
	}
	return n
}

// atBoundary says whether a row is fitted beyond the bound on the side of
// its own outcome.
func atBoundary(eta, y, bound float64) bool {
	return (eta > bound && y == 1) || (eta < -bound && y == 0)
}

// logistic returns μ = 1/(1+e^−η) and 1−μ, each to full relative
// precision, from one exponential.
func logistic(eta float64) (mu, q float64) {
	e := math.Exp(-math.Abs(eta))
	if eta >= 0 {
		mu = 1 / (1 + e)
		q = e * mu
	} else {
		q = 1 / (1 + e)
		mu = e * q
	}
	return mu, q
}

func penDev(ll float64, gamma []float64, lambda float64) float64 {
	pd := -2 * ll
	if lambda > 0 {
		var s float64
		for _, g := range gamma[1:] {
			s += g * g
		}
		pd += lambda * s
	}
	return pd
}

// screenSeparation finds terms that alone separate the outcome: every
// treated row on one side of a value and every control row on the other
// (complete), or touching it (quasi-complete), which catches the common
// case of a level seen in one arm only before any iteration.
func screenSeparation(d *stdDesign, terms []string) (string, []string) {
	kind := make([]int, len(d.cols)) // 0 none, 1 quasi, 2 complete
	for a, j := range d.idx {
		r := d.ranges[j]
		lo0, hi0, lo1, hi1 := r[0], r[1], r[2], r[3]
		switch {
		case hi0 < lo1 || hi1 < lo0:
			kind[a] = 2
		case hi0 == lo1 || hi1 == lo0:
			kind[a] = 1
		}
	}
	var complete, quasi []string
	for a, kd := range kind {
		switch kd {
		case 2:
			complete = append(complete, terms[1+d.idx[a]])
		case 1:
			quasi = append(quasi, terms[1+d.idx[a]])
		}
	}
	if len(complete) > 0 {
		return ReasonCompleteSeparation, complete
	}
	if len(quasi) > 0 {
		return ReasonQuasiCompleteSeparation, quasi
	}
	return "", nil
}
