package aggregate

import (
	"encoding/json"
	"math"
)

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

// arms lists a batch's rows per arm, control (0) then treated (1), so that
// per-arm loops keep their sums in registers instead of indexing by arm.
type arms [2][]int32

// split fills r from treatment codes, leaving out rows coded −1.
func (r *arms) split(arm []int8) {
	r[0], r[1] = r[0][:0], r[1][:0]
	for i, a := range arm {
		if a >= 0 {
			r[a] = append(r[a], int32(i))
		}
	}
}

// armMoments computes one batch's moments of x per arm, unweighted into u
// and weighted by w into wt, with the corrected two-pass algorithm (Chan,
// Golub & LeVeque 1983, "Algorithms for computing the sample variance",
// Am. Stat. 37(3)): M2 = Σ d² − (Σ d)²/W with d = x − mean, which removes
// most of the rounding left in the first pass's mean. w[i] is 0 for rows
// without a usable weight.
func armMoments(x []float64, rows *arms, w []float64, u, wt *[2]Moments) {
	armMomentsHist(x, rows, w, u, wt, nil, nil)
}

// armMomentsHist is armMoments that also adds each row's weight into
// h[a][bin9(e, x)] when e is not nil: the second pass reads the rows anyway.
func armMomentsHist(x []float64, rows *arms, w []float64, u, wt *[2]Moments, e *deciles, h *[2][]float64) {
	for a, idx := range rows {
		var sx, sw, swx float64
		for _, i := range idx {
			xi, wi := x[i], w[i]
			sx += xi
			sw += wi
			swx += wi * xi
		}
		n := float64(len(idx))
		if n == 0 {
			u[a], wt[a] = Moments{}, Moments{}
			continue
		}
		mean := sx / n
		meanw := 0.0
		if sw > 0 {
			meanw = swx / sw
		}
		var sd, sd2, swd, swd2 float64
		if e != nil {
			ha := h[a]
			// bin9 written out: the compiler does not inline it here
			e0, e1, e2, e3, e4, e5, e6, e7, e8 := e[0], e[1], e[2], e[3], e[4], e[5], e[6], e[7], e[8]
			for _, i := range idx {
				xi, wi := x[i], w[i]
				d := xi - mean
				sd += d
				sd2 += d * d
				dw := xi - meanw
				wd := wi * dw
				swd += wd
				swd2 += wd * dw
				k := b2i(e0 < xi) + b2i(e1 < xi) + b2i(e2 < xi) + b2i(e3 < xi) + b2i(e4 < xi) +
					b2i(e5 < xi) + b2i(e6 < xi) + b2i(e7 < xi) + b2i(e8 < xi)
				ha[k] += wi
			}
		} else {
			for _, i := range idx {
				d := x[i] - mean
				sd += d
				sd2 += d * d
				dw := x[i] - meanw
				wd := w[i] * dw
				swd += wd
				swd2 += wd * dw
			}
		}
		u[a] = Moments{W: n, Mean: mean + sd/n, M2: max(sd2-sd*sd/n, 0)}
		if sw > 0 {
			wt[a] = Moments{W: sw, Mean: meanw + swd/sw, M2: max(swd2-swd*swd/sw, 0)}
		} else {
			wt[a] = Moments{}
		}
	}
}

// MarshalJSON writes {"w", "mean", "m2"} as Sum does its numbers.
func (m Moments) MarshalJSON() ([]byte, error) {
	b := make([]byte, 0, 80)
	b = append(b, `{"w":`...)
	b = appendNumber(b, m.W)
	b = append(b, `,"mean":`...)
	b = appendNumber(b, m.Mean)
	b = append(b, `,"m2":`...)
	b = appendNumber(b, m.M2)
	return append(b, '}'), nil
}

// UnmarshalJSON reads what MarshalJSON writes.
func (m *Moments) UnmarshalJSON(data []byte) error {
	var raw struct {
		W    json.RawMessage `json:"w"`
		Mean json.RawMessage `json:"mean"`
		M2   json.RawMessage `json:"m2"`
	}
	if err := json.Unmarshal(data, &raw); err != nil {
		return err
	}
	var err error
	if m.W, err = parseNumber(raw.W); err != nil {
		return err
	}
	if m.Mean, err = parseNumber(raw.Mean); err != nil {
		return err
	}
	m.M2, err = parseNumber(raw.M2)
	return err
}
