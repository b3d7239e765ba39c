package htmlreport

import (
	"fmt"
	"math"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
)

// balanceRow is one term's balance as the page shows it.
type balanceRow struct {
	Term                 string
	Unweighted, Weighted float64 // |SMD|; NaN or +Inf when not computable
	VarRatio, KS         float64 // weighted; NaN when not computable
	Fails                bool    // weighted |SMD| above the threshold, or not computable
}

// maxBalanceChartRows bounds the chart's height; the table lists every term.
const maxBalanceChartRows = 40

// balanceChart draws one row per term, worst weighted |SMD| at the top, an
// arrow from the unweighted to the weighted |SMD|, over a shaded target
// zone [0, threshold]. rows must be sorted worst first.
func balanceChart(rows []balanceRow, threshold float64) *chart {
	if len(rows) > maxBalanceChartRows {
		rows = rows[:maxBalanceChartRows]
	}
	n := len(rows)
	p := newPlot()
	p.X.Label.Text = "|standardized mean difference|  (treated − control, in pooled SDs)"
	p.Y.Label.Text = ""
	names := make([]string, n)
	xmax := threshold * 2
	for i, r := range rows {
		names[n-1-i] = r.Term
		for _, v := range []float64{r.Unweighted, r.Weighted} {
			if finite(v) {
				xmax = math.Max(xmax, v)
			}
		}
	}
	nominalY(p, names)
	p.X.Min, p.X.Max = 0, xmax*1.12
	p.X.Tick.Marker = plot.TickerFunc(niceTicks)
	p.Y.Min, p.Y.Max = -0.7, float64(n)+0.2 // headroom for the zone's label
	p.Add(&targetZone{threshold: threshold, rows: n}, &smdArrows{rows: rows})
	return &chart{
		Name:  "balance",
		Title: fmt.Sprintf("Balance: how far weighting moved each term's |SMD|; target zone below %g", threshold),
		Plot:  p,
		W:     vg.Points(720),
		H:     vg.Points(float64(80 + 22*max(n, 3))),
	}
}

// targetZone shades x ∈ [0, threshold] and marks its edge.
type targetZone struct {
	threshold float64
	rows      int
}

func (z *targetZone) Plot(c draw.Canvas, p *plot.Plot) {
	x, _ := p.Transforms(&c)
	x0, x1 := x(0), x(math.Min(z.threshold, p.X.Max))
	y0, y1 := c.Min.Y, c.Max.Y
	c.FillPolygon(tint(colGood, 0.18), []vg.Point{{X: x0, Y: y0}, {X: x1, Y: y0}, {X: x1, Y: y1}, {X: x0, Y: y1}})
	edge := draw.LineStyle{Color: colGood, Width: vg.Points(1.2), Dashes: []vg.Length{vg.Points(4), vg.Points(3)}}
	c.StrokeLine2(edge, x1, y0, x1, y1)
	lab := textStyle(10, colGood)
	lab.XAlign = draw.XLeft
	lab.YAlign = draw.YTop
	c.FillText(lab, vg.Point{X: x1 + vg.Points(4), Y: y1 - vg.Points(3)}, fmt.Sprintf("target: below %g", z.threshold))
}

// smdArrows draws, per row, a hollow ring at the unweighted |SMD| and an
// arrow to the weighted one; terms that still fail are drawn in vermillion
// and labelled.
type smdArrows struct{ rows []balanceRow }

func (a *smdArrows) Plot(c draw.Canvas, p *plot.Plot) {
	x, y := p.Transforms(&c)
	n := len(a.rows)
	// Key, in the headroom at the top right.
	key := textStyle(10, colInk)
	key.XAlign, key.YAlign = draw.XRight, draw.YCenter
	ky := c.Max.Y - vg.Points(9)
	kx := c.Max.X - vg.Points(4)
	c.FillText(key, vg.Point{X: kx, Y: ky}, "after weighting")
	kx -= key.Width("after weighting") + vg.Points(8)
	c.DrawGlyph(draw.GlyphStyle{Color: colGood, Radius: vg.Points(4), Shape: draw.CircleGlyph{}}, vg.Point{X: kx, Y: ky})
	kx -= vg.Points(14)
	c.FillText(key, vg.Point{X: kx, Y: ky}, "before weighting  →")
	kx -= key.Width("before weighting  →") + vg.Points(8)
	c.DrawGlyph(draw.GlyphStyle{Color: colMuted, Radius: vg.Points(3.5), Shape: draw.RingGlyph{}}, vg.Point{X: kx, Y: ky})
	for i, r := range a.rows {
		yy := y(float64(n - 1 - i))
		// Light row guide, so a long list stays readable.
		c.StrokeLine2(draw.LineStyle{Color: colGrid, Width: vg.Points(0.5)}, c.Min.X, yy, c.Max.X, yy)
		col := colGood
		if r.Fails {
			col = colTreated
		}
		lab := textStyle(9.5, col)
		lab.YAlign = draw.YCenter
		if !finite(r.Weighted) {
			lab.Color = colTreated
			c.FillText(lab, vg.Point{X: x(0) + vg.Points(4), Y: yy}, "weighted SMD not computable")
			continue
		}
		xw := x(r.Weighted)
		if finite(r.Unweighted) {
			xu := x(r.Unweighted)
			c.StrokeLine2(draw.LineStyle{Color: colMuted, Width: vg.Points(1.4)}, xu, yy, xw, yy)
			c.DrawGlyph(draw.GlyphStyle{Color: colMuted, Radius: vg.Points(3.5), Shape: draw.RingGlyph{}}, vg.Point{X: xu, Y: yy})
			// Arrowhead pointing from xu to xw.
			dir := vg.Length(1)
			if xw < xu {
				dir = -1
			}
			if math.Abs(float64(xu-xw)) > 14 {
				h := vg.Points(6)
				tip := xw - dir*vg.Points(4.5) // just short of the dot
				c.FillPolygon(colMuted, []vg.Point{{X: tip, Y: yy}, {X: tip - dir*h, Y: yy + h/2}, {X: tip - dir*h, Y: yy - h/2}})
			}
		}
		c.DrawGlyph(draw.GlyphStyle{Color: col, Radius: vg.Points(4), Shape: draw.CircleGlyph{}}, vg.Point{X: xw, Y: yy})
		if r.Fails {
			lab.XAlign = draw.XLeft
			right := xw
			if finite(r.Unweighted) && x(r.Unweighted) > right {
				right = x(r.Unweighted)
			}
			c.FillText(lab, vg.Point{X: right + vg.Points(8), Y: yy}, fmt.Sprintf("still %.3g", r.Weighted))
		}
	}
}

func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }
