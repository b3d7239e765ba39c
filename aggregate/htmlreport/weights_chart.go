package htmlreport

import (
	"fmt"
	"math"
	"strconv"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
)

// weightsFig is what the weights chart draws. The report keeps no
// histogram of the weights; it keeps each arm's rows and Σw per propensity
// bin, its largest weights, Σw and the effective sample size. Within an arm
// the weight is a monotone function of the propensity under every policy,
// so a propensity bin's rows have neighbouring weights, and the bin's mean
// weight Σw/n places them on the weight axis.
type weightsFig struct {
	BinRows  [2][]int64   // rows per propensity bin
	BinSumW  [2][]float64 // Σw per propensity bin
	Top      [2][]float64 // largest weights per arm (control, treated), descending
	Mean     [2]float64   // Σw/n per arm
	ESS      [2]float64
	N        [2]int64
	TopShare [2]float64 // share of the arm's Σw held by Top
	Cap      float64    // truncation cap; 0 = none
}

// weightsChart draws one lane per arm on a log weight axis: a stick per
// propensity bin at the bin's mean weight, as tall as the bin's share of
// the arm's rows; the arm's mean weight as a bar; its largest weights as
// dots; the truncation cap as a line; and the ESS and the largest weights'
// share of Σw as text.
func weightsChart(f weightsFig) (*chart, error) {
	for a := 0; a < 2; a++ {
		if len(f.BinSumW[a]) != len(f.BinRows[a]) {
			return nil, fmt.Errorf("overlap: the %s arm has %d weighted propensity bins for %d counted ones", armName(a), len(f.BinSumW[a]), len(f.BinRows[a]))
		}
	}
	p := newPlot()
	p.X.Label.Text = "weight (log scale)"
	p.Y.Label.Text = ""
	lo, hi := math.Inf(1), math.Inf(-1)
	see := func(v float64) {
		if v > 0 && finite(v) {
			lo, hi = math.Min(lo, v), math.Max(hi, v)
		}
	}
	for a := 0; a < 2; a++ {
		see(f.Mean[a])
		for _, w := range f.Top[a] {
			see(w)
		}
		for k, n := range f.BinRows[a] {
			if n > 0 {
				see(f.BinSumW[a][k] / float64(n))
			}
		}
	}
	see(f.Cap)
	if lo > hi { // nothing positive to draw
		lo, hi = 1, 10
	}
	lo, hi = lo/2, hi*2.5
	p.X.Scale = plot.LogScale{}
	p.X.Tick.Marker = plot.TickerFunc(logTicks)
	p.X.Min, p.X.Max = lo, hi
	p.NominalY("control", "treated")
	p.Y.Min, p.Y.Max = -0.45, 1.95
	p.Add(&weightLanes{f: f})
	return &chart{
		Name:  "weights",
		Title: "Weights: each arm's mean weight and largest weights on a log scale, with the effective sample size",
		Plot:  p,
		W:     vg.Points(720),
		H:     vg.Points(290),
	}, nil
}

// logTicks labels 1, 2 and 5 times the powers of ten in [min, max] and marks
// the other integers between them.
func logTicks(min, max float64) []plot.Tick {
	var t []plot.Tick
	for e := math.Floor(math.Log10(min)); e <= math.Ceil(math.Log10(max)); e++ {
		base := math.Pow(10, e)
		for i := 1; i < 10; i++ {
			v := base * float64(i)
			if v < min || v > max {
				continue
			}
			tk := plot.Tick{Value: v}
			if i == 1 || i == 2 || i == 5 {
				tk.Label = strconv.FormatFloat(v, 'g', -1, 64)
			}
			t = append(t, tk)
		}
	}
	return t
}

type weightLanes struct{ f weightsFig }

func (l *weightLanes) Plot(c draw.Canvas, p *plot.Plot) {
	x, y := p.Transforms(&c)
	f := l.f
	if f.Cap > 0 {
		xc := x(f.Cap)
		c.StrokeLine2(draw.LineStyle{Color: colInk, Width: vg.Points(1), Dashes: []vg.Length{vg.Points(3), vg.Points(3)}}, xc, c.Min.Y, xc, c.Max.Y)
		lab := textStyle(9.5, colInk)
		lab.XAlign, lab.YAlign = draw.XRight, draw.YTop
		c.FillText(lab, vg.Point{X: xc - vg.Points(3), Y: c.Max.Y - vg.Points(3)}, fmt.Sprintf("truncation cap %.4g", f.Cap))
	}
	for a := 0; a < 2; a++ {
		yy := y(float64(a))
		col := armColor(a)
		c.StrokeLine2(draw.LineStyle{Color: colGrid, Width: vg.Points(0.6)}, c.Min.X, yy, c.Max.X, yy)
		// Sticks: rows per propensity bin at the bin's mean weight.
		var tot int64
		for _, n := range f.BinRows[a] {
			tot += n
		}
		var zero int64
		full := y(float64(a)+0.55) - yy
		stick := draw.LineStyle{Color: tint(col, 0.55), Width: vg.Points(2.4)}
		for k, n := range f.BinRows[a] {
			if n == 0 || tot == 0 {
				continue
			}
			m := f.BinSumW[a][k] / float64(n)
			if !(m > 0) || !finite(m) {
				zero += n
				continue
			}
			h := full * vg.Length(float64(n)/float64(tot)) / vg.Length(maxShare(f.BinRows[a]))
			c.StrokeLine2(stick, x(m), yy, x(m), yy+h)
		}
		if m := f.Mean[a]; m > 0 && finite(m) {
			xm := x(m)
			c.StrokeLine2(draw.LineStyle{Color: colInk, Width: vg.Points(1.6)}, xm, yy-vg.Points(4), xm, yy+full)
			lab := textStyle(9, colInk)
			lab.XAlign, lab.YAlign = draw.XLeft, draw.YBottom
			c.FillText(lab, vg.Point{X: xm + vg.Points(3), Y: yy + full - vg.Points(10)}, "mean "+num(m))
		}
		// Largest weights below the lane, alternating rows so ties stay visible.
		for i, w := range f.Top[a] {
			if !(w > 0) || !finite(w) {
				continue
			}
			off := vg.Points(6)
			if i%2 == 1 {
				off = vg.Points(12)
			}
			c.DrawGlyph(draw.GlyphStyle{Color: col, Radius: vg.Points(3), Shape: draw.CircleGlyph{}}, vg.Point{X: x(w), Y: yy - off})
		}
		lab := textStyle(10.5, col)
		lab.XAlign, lab.YAlign = draw.XLeft, draw.YBottom
		msg := fmt.Sprintf("%s: ESS %s of %s rows (%s)", armName(a), groupFloat(f.ESS[a]), groupInt(f.N[a]), pct(f.ESS[a]/float64(f.N[a])))
		if k := len(f.Top[a]); k > 0 {
			msg += fmt.Sprintf("; the %d largest weights (dots) hold %s of Σw", k, pct(f.TopShare[a]))
		}
		if zero > 0 {
			msg += fmt.Sprintf("; %s rows have weight 0 (trimmed)", groupInt(zero))
		}
		c.FillText(lab, vg.Point{X: c.Min.X + vg.Points(6), Y: y(float64(a) + 0.62)}, msg)
	}
}

// pct formats a share as a percentage, "–" when undefined.
func pct(v float64) string {
	if !finite(v) {
		return "–"
	}
	switch a := math.Abs(v); {
	case a == 0:
		return "0%"
	case a < 0.001:
		return strconv.FormatFloat(100*v, 'g', 2, 64) + "%"
	}
	return strconv.FormatFloat(100*v, 'f', 1, 64) + "%"
}

// groupFloat rounds v to an integer and groups its digits.
func groupFloat(v float64) string {
	if !finite(v) {
		return "–"
	}
	return groupInt(int64(math.Round(v)))
}

// maxShare is the largest count's share of the total (1 when empty), the
// stick height's full scale.
func maxShare(n []int64) float64 {
	var tot, top int64
	for _, v := range n {
		tot += v
		top = max(top, v)
	}
	if tot == 0 || top == 0 {
		return 1
	}
	return float64(top) / float64(tot)
}
