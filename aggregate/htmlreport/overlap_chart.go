package htmlreport

import (
	"fmt"
	"image/color"
	"math"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
)

// overlapFig is what the overlap chart draws.
type overlapFig struct {
	Edges  []float64
	Counts [2][]int64 // control, treated
	// Below and Above are rows with e < 0.01 and e > 0.99 per arm.
	Below, Above [2]int64
	Clip, Trim   float64 // the policy's ε and α; 0 = none
	Clipped      int64
	Trimmed      int64
}

// overlapChart draws the two arms' propensity distributions as step
// outlines (share of the arm's rows per bin) on [0, 1], shades the bins
// where both arms have rows, and hatches the tails that trimming removed or
// clipping capped, with the row counts written beside them.
func overlapChart(f overlapFig) (*chart, error) {
	nb := len(f.Edges) - 1
	if nb < 1 || len(f.Counts[0]) != nb || len(f.Counts[1]) != nb {
		return nil, fmt.Errorf("overlap: %d propensity edges for %d and %d bin counts", len(f.Edges), len(f.Counts[0]), len(f.Counts[1]))
	}
	p := newPlot()
	p.X.Label.Text = "propensity score e(x) = P(treated | x)"
	p.Y.Label.Text = "share of the arm's rows per bin (%)"
	p.X.Min, p.X.Max = 0, 1
	p.X.Tick.Marker = plot.ConstantTicks(fixedTicks(0, 1, 0.1, "%.1f"))

	var shares [2][]float64
	top := 0.0
	for a := 0; a < 2; a++ {
		var tot int64
		for _, c := range f.Counts[a] {
			tot += c
		}
		shares[a] = make([]float64, nb)
		for k, c := range f.Counts[a] {
			if tot > 0 {
				shares[a][k] = 100 * float64(c) / float64(tot)
			}
			top = math.Max(top, shares[a][k])
		}
	}
	if top == 0 {
		top = 1
	}
	p.Y.Min, p.Y.Max = 0, top*1.45 // headroom for the key and tail labels

	p.Add(&commonSupport{edges: f.Edges, counts: f.Counts})
	p.Add(&tailHatch{f: f})
	for _, a := range []int{0, 1} {
		pts := make(plotter.XYs, 0, 2*nb+2)
		pts = append(pts, plotter.XY{X: f.Edges[0], Y: 0})
		for k := 0; k < nb; k++ {
			pts = append(pts, plotter.XY{X: f.Edges[k], Y: shares[a][k]}, plotter.XY{X: f.Edges[k+1], Y: shares[a][k]})
		}
		pts = append(pts, plotter.XY{X: f.Edges[nb], Y: 0})
		l, err := plotter.NewLine(pts)
		if err != nil {
			return nil, fmt.Errorf("overlap: %w", err)
		}
		l.LineStyle = draw.LineStyle{Color: armColor(a), Width: vg.Points(2)}
		if a == 0 {
			l.LineStyle.Dashes = []vg.Length{vg.Points(5), vg.Points(2)}
		}
		p.Add(l)
		var n int64
		for _, c := range f.Counts[a] {
			n += c
		}
		p.Legend.Add(fmt.Sprintf("%s (%s rows)", armName(a), groupInt(n)), l)
	}
	p.Legend.Add("both arms have rows", swatch{tint(colMuted, 0.11)})
	p.Legend.Left = true
	p.Legend.XOffs = vg.Points(270)
	p.Legend.YOffs = -vg.Points(34) // below the two lines of tail labels
	p.Legend.Padding = vg.Points(3)
	return &chart{
		Name:  "overlap",
		Title: "Overlap: propensity distributions of the treated and control rows",
		Plot:  p,
		W:     vg.Points(720),
		H:     vg.Points(330),
	}, nil
}

func armName(a int) string {
	if a == 1 {
		return "treated"
	}
	return "control"
}

// fixedTicks returns labelled ticks from lo to hi in steps of step.
func fixedTicks(lo, hi, step float64, format string) []plot.Tick {
	var t []plot.Tick
	for i := 0; ; i++ {
		v := lo + float64(i)*step
		if v > hi+step/1e6 {
			break
		}
		t = append(t, plot.Tick{Value: v, Label: fmt.Sprintf(format, v)})
	}
	return t
}

// commonSupport shades the runs of bins in which both arms have rows.
type commonSupport struct {
	edges  []float64
	counts [2][]int64
}

func (s *commonSupport) Plot(c draw.Canvas, p *plot.Plot) {
	x, _ := p.Transforms(&c)
	fill := tint(colMuted, 0.11)
	nb := len(s.edges) - 1
	for k := 0; k < nb; {
		if s.counts[0][k] == 0 || s.counts[1][k] == 0 {
			k++
			continue
		}
		j := k
		for j < nb && s.counts[0][j] > 0 && s.counts[1][j] > 0 {
			j++
		}
		x0, x1 := x(s.edges[k]), x(s.edges[j])
		c.FillPolygon(fill, []vg.Point{{X: x0, Y: c.Min.Y}, {X: x1, Y: c.Min.Y}, {X: x1, Y: c.Max.Y}, {X: x0, Y: c.Max.Y}})
		k = j
	}
}

// tailHatch hatches the propensity tails the policy removed (trim) or
// capped (clip) and writes the row counts of each tail.
type tailHatch struct{ f overlapFig }

func (h *tailHatch) Plot(c draw.Canvas, p *plot.Plot) {
	x, _ := p.Transforms(&c)
	f := h.f
	line := draw.LineStyle{Color: colWarn, Width: vg.Points(1)}
	lab := textStyle(9.5, colInk)
	y := c.Max.Y - vg.Points(4)
	lineH := vg.Points(12)

	cut, what := 0.0, ""
	var removed int64
	switch {
	case f.Trim > 0:
		cut, what, removed = f.Trim, "trimmed", f.Trimmed
	case f.Clip > 0:
		cut, what, removed = f.Clip, "clipped", f.Clipped
	}
	if cut > 0 {
		hatch(&c, line, x(0), c.Min.Y, x(cut), c.Max.Y)
		hatch(&c, line, x(1-cut), c.Min.Y, x(1), c.Max.Y)
	}
	// Positivity tails e < 0.01 and e > 0.99, marked and counted per arm.
	dots := draw.LineStyle{Color: colMuted, Width: vg.Points(0.8), Dashes: []vg.Length{vg.Points(1), vg.Points(2)}}
	for _, e := range []float64{0.01, 0.99} {
		c.StrokeLine2(dots, x(e), c.Min.Y, x(e), c.Max.Y)
	}
	lab.YAlign = draw.YTop
	lab.XAlign = draw.XLeft
	left := x(math.Max(cut, 0)) + vg.Points(5)
	c.FillText(lab, vg.Point{X: left, Y: y}, fmt.Sprintf("e < 0.01: %s treated, %s control", groupInt(f.Below[1]), groupInt(f.Below[0])))
	lab.XAlign = draw.XRight
	right := x(1-math.Max(cut, 0)) - vg.Points(5)
	c.FillText(lab, vg.Point{X: right, Y: y}, fmt.Sprintf("e > 0.99: %s treated, %s control", groupInt(f.Above[1]), groupInt(f.Above[0])))
	if cut > 0 {
		var msg string
		if what == "trimmed" {
			msg = fmt.Sprintf("hatched: e outside [%g, %g], trimmed to weight 0: %s rows in both tails", cut, 1-cut, groupInt(removed))
		} else {
			msg = fmt.Sprintf("hatched: e outside [%g, %g], clipped to the bound: %s rows in both tails", cut, 1-cut, groupInt(removed))
		}
		lab.XAlign = draw.XCenter
		c.FillText(lab, vg.Point{X: (c.Min.X + c.Max.X) / 2, Y: y - lineH}, msg)
	}
}

// hatch fills the rectangle (x0,y0)–(x1,y1) with diagonal lines.
func hatch(c *draw.Canvas, sty draw.LineStyle, x0, y0, x1, y1 vg.Length) {
	if x1 <= x0 || y1 <= y0 {
		return
	}
	c.FillPolygon(tint(colWarn, 0.15), []vg.Point{{X: x0, Y: y0}, {X: x1, Y: y0}, {X: x1, Y: y1}, {X: x0, Y: y1}})
	step := vg.Points(5)
	h := y1 - y0
	// Lines x − y = const, clipped to the rectangle.
	for d := -h; d < x1-x0; d += step {
		ax, ay := x0+d, y0
		if d < 0 {
			ax, ay = x0, y0-d
		}
		bx, by := x0+d+h, y1
		if bx > x1 {
			bx, by = x1, y1-(bx-x1)
		}
		if by <= ay {
			continue
		}
		c.StrokeLine2(sty, ax, ay, bx, by)
	}
}

// swatch is a legend thumbnail of a filled box.
type swatch struct{ fill color.Color }

func (s swatch) Thumbnail(c *draw.Canvas) {
	box := []vg.Point{{X: c.Min.X, Y: c.Min.Y}, {X: c.Max.X, Y: c.Min.Y}, {X: c.Max.X, Y: c.Max.Y}, {X: c.Min.X, Y: c.Max.Y}}
	c.FillPolygon(s.fill, box)
	c.StrokeLines(draw.LineStyle{Color: colMuted, Width: vg.Points(0.8)}, append(box, box[0]))
}

// groupInt writes n with thin-space thousands separators.
func groupInt(n int64) string {
	s := fmt.Sprint(n)
	neg := false
	if n < 0 {
		neg, s = true, s[1:]
	}
	var out []byte
	for i := range len(s) {
		if i > 0 && (len(s)-i)%3 == 0 {
			out = append(out, ',')
		}
		out = append(out, s[i])
	}
	if neg {
		return "-" + string(out)
	}
	return string(out)
}
