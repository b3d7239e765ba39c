package htmlreport

import (
	"image/color"
	"math"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
)

// driftTerm is one term's mean shift since the fit sample, in fit-sample
// standard deviations.
type driftTerm struct {
	Term    string
	ShiftSD float64
}

// maxDriftChartRows is how many of the most shifted terms the chart shows.
const maxDriftChartRows = 12

var colShift = color.RGBA{0xCC, 0x79, 0xA7, 0xFF} // Okabe–Ito reddish purple

// driftChart draws the terms that moved most since the fit sample as
// signed bars, largest |shift| at the top. terms must be sorted that way.
func driftChart(terms []driftTerm) *chart {
	if len(terms) > maxDriftChartRows {
		terms = terms[:maxDriftChartRows]
	}
	n := len(terms)
	p := newPlot()
	p.X.Label.Text = "mean now − mean at fit  (in fit-sample standard deviations)"
	names := make([]string, n)
	m := 0.1
	for i, t := range terms {
		names[n-1-i] = t.Term
		if finite(t.ShiftSD) {
			m = math.Max(m, math.Abs(t.ShiftSD))
		}
	}
	nominalY(p, names)
	p.X.Min, p.X.Max = -m*1.3, m*1.3
	p.X.Tick.Marker = plot.TickerFunc(niceTicks)
	p.Y.Min, p.Y.Max = -0.7, float64(max(n, 1))-0.3
	p.Add(&shiftBars{terms: terms})
	return &chart{
		Name:  "drift",
		Title: "Drift: the terms whose mean moved most since the fit sample",
		Plot:  p,
		W:     vg.Points(720),
		H:     vg.Points(float64(70 + 22*max(n, 3))),
	}
}

type shiftBars struct{ terms []driftTerm }

func (b *shiftBars) Plot(c draw.Canvas, p *plot.Plot) {
	x, y := p.Transforms(&c)
	n := len(b.terms)
	x0 := x(0)
	c.StrokeLine2(draw.LineStyle{Color: colMuted, Width: vg.Points(1)}, x0, c.Min.Y, x0, c.Max.Y)
	h := vg.Points(7)
	for i, t := range b.terms {
		yy := y(float64(n - 1 - i))
		lab := textStyle(9.5, colInk)
		lab.YAlign = draw.YCenter
		if !finite(t.ShiftSD) {
			lab.XAlign = draw.XLeft
			c.FillText(lab, vg.Point{X: x0 + vg.Points(4), Y: yy}, "not computable")
			continue
		}
		x1 := x(t.ShiftSD)
		c.FillPolygon(colShift, []vg.Point{{X: x0, Y: yy - h}, {X: x1, Y: yy - h}, {X: x1, Y: yy + h}, {X: x0, Y: yy + h}})
		if t.ShiftSD >= 0 {
			lab.XAlign = draw.XLeft
			x1 += vg.Points(4)
		} else {
			lab.XAlign = draw.XRight
			x1 -= vg.Points(4)
		}
		c.FillText(lab, vg.Point{X: x1, Y: yy}, signed3(t.ShiftSD))
	}
}
