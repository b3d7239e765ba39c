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
// histogram of the weights, only each arm's largest weights, Σw and the
// effective sample size, so that is what is drawn.
type weightsFig struct {
	Top      [2][]float64 // largest weights per arm (control, treated), descending
	Mean     [2]float64   // Σw/n per arm
	ESS      [2]float64
	N        [2]int64
	TopShare [2]float64 // share of the arm's Σw held by Top
	Cap      float64    // truncation cap; 0 = none
}

// weightsChart draws one lane per arm on a log weight axis: the arm's mean
// weight as a bar, its largest weights as dots, the truncation cap as a
// line, and the ESS and the largest weights' share of Σw as text.
func weightsChart(f weightsFig) *chart {
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
	p.Y.Min, p.Y.Max = -0.6, 1.75
	p.Add(&weightLanes{f: f})
	return &chart{
		Name:  "weights",
		Title: "Weights: each arm's mean weight and largest weights on a log scale, with the effective sample size",
		Plot:  p,
		W:     vg.Points(720),
		H:     vg.Points(230),
	}
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
		if m := f.Mean[a]; m > 0 && finite(m) {
			xm := x(m)
			c.StrokeLine2(draw.LineStyle{Color: colInk, Width: vg.Points(2.2)}, xm, yy-vg.Points(11), xm, yy+vg.Points(11))
			lab := textStyle(9, colInk)
			lab.XAlign, lab.YAlign = draw.XCenter, draw.YTop
			c.FillText(lab, vg.Point{X: xm, Y: yy - vg.Points(13)}, fmt.Sprintf("mean %.3g", m))
		}
		// Alternate the dots above and below the lane so ties stay visible.
		for i, w := range f.Top[a] {
			if !(w > 0) || !finite(w) {
				continue
			}
			off := vg.Points(4)
			if i%2 == 1 {
				off = -off
			}
			c.DrawGlyph(draw.GlyphStyle{Color: col, Radius: vg.Points(3.5), Shape: draw.CircleGlyph{}}, vg.Point{X: x(w), Y: yy + off})
		}
		lab := textStyle(10.5, col)
		lab.XAlign, lab.YAlign = draw.XLeft, draw.YBottom
		msg := fmt.Sprintf("%s: ESS %s of %s rows (%s)", armName(a), groupFloat(f.ESS[a]), groupInt(f.N[a]), pct(f.ESS[a]/float64(f.N[a])))
		if k := len(f.Top[a]); k > 0 {
			msg += fmt.Sprintf("; the %d largest weights (dots) hold %s of Σw", k, pct(f.TopShare[a]))
		}
		c.FillText(lab, vg.Point{X: c.Min.X + vg.Points(6), Y: yy + vg.Points(14)}, msg)
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
