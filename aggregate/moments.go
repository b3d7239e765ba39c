package aggregate

import "math"

// Moments summarize a sample by its total weight, mean and sum of squared
// deviations. Unweighted samples use weight 1 per row, so W is the count.
//
//	W = Σ w_i,  Mean = Σ w_i x_i / W,  M2 = Σ w_i (x_i − Mean)²
//
// Two partial summaries merge exactly (up to rounding) by the pairwise
// update of Chan, Golub & LeVeque (1979, "Updating formulae and a pairwise
// algorithm for computing sample variances", COMPSTAT), in its weighted form
// (West 1979, "Updating mean and variance estimates: an improved method",
// CACM 22(9)):
//
//	δ = Mean_b − Mean_a,  W = W_a + W_b
//	Mean = Mean_a + δ·W_b/W,  M2 = M2_a + M2_b + δ²·W_a·W_b/W
type Moments struct {
	W    float64 `json:"w"`
	Mean float64 `json:"mean"`
	M2   float64 `json:"m2"`
}

// Merge folds o into m.
func (m *Moments) Merge(o Moments) {
	switch {
	case o.W == 0:
		return
	case m.W == 0:
		*m = o
		return
	}
	w := m.W + o.W
	d := o.Mean - m.Mean
	m.Mean += d * (o.W / w)
	m.M2 += o.M2 + d*d*(m.W/w)*o.W
	m.W = w
}

// SampleVar is the unweighted sample variance M2/(n − 1); NaN for n < 2.
func (m Moments) SampleVar() float64 {
	if m.W < 2 {
		return math.NaN()
	}
	return m.M2 / (m.W - 1)
}

// WeightedVar is the weighted variance Σw(x − x̄_w)²/Σw; NaN when W = 0.
func (m Moments) WeightedVar() float64 {
	if m.W <= 0 {
		return math.NaN()
	}
	return m.M2 / m.W
}

// armMoments computes one batch's moments of x per arm, unweighted into u
// and weighted by w into wt, with the corrected two-pass algorithm (Chan,
// Golub & LeVeque 1983, "Algorithms for computing the sample variance",
// Am. Stat. 37(3)): M2 = Σ d² − (Σ d)²/W with d = x − mean, which removes
// most of the rounding left in the first pass's mean. arm[i] is 0 or 1, or
// −1 for rows left out; w[i] is 0 for rows without a usable weight.
func armMoments(x []float64, arm []int8, w []float64, u, wt *[2]Moments) {
	var n, sx, sw, swx [2]float64
	for i, a := range arm {
		if a < 0 {
			continue
		}
		xi := x[i]
		n[a]++
		sx[a] += xi
		sw[a] += w[i]
		swx[a] += w[i] * xi
	}
	var mean, meanw [2]float64
	for a := 0; a < 2; a++ {
		if n[a] > 0 {
			mean[a] = sx[a] / n[a]
		}
		if sw[a] > 0 {
			meanw[a] = swx[a] / sw[a]
		}
	}
	var sd, sd2, swd, swd2 [2]float64
	for i, a := range arm {
		if a < 0 {
			continue
		}
		d := x[i] - mean[a]
		sd[a] += d
		sd2[a] += d * d
		dw := x[i] - meanw[a]
		wd := w[i] * dw
		swd[a] += wd
		swd2[a] += wd * dw
	}
	for a := 0; a < 2; a++ {
		if n[a] > 0 {
			m2 := sd2[a] - sd[a]*sd[a]/n[a]
			if m2 < 0 {
				m2 = 0
			}
			u[a] = Moments{W: n[a], Mean: mean[a] + sd[a]/n[a], M2: m2}
		} else {
			u[a] = Moments{}
		}
		if sw[a] > 0 {
			m2 := swd2[a] - swd[a]*swd[a]/sw[a]
			if m2 < 0 {
				m2 = 0
			}
			wt[a] = Moments{W: sw[a], Mean: meanw[a] + swd[a]/sw[a], M2: m2}
		} else {
			wt[a] = Moments{}
		}
	}
}
