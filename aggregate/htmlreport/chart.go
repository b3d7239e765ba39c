package htmlreport

import (
	"bytes"
	"fmt"
	"image/color"
	"io"
	"math"
	"strconv"
	"strings"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/font"
	"gonum.org/v1/plot/text"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgimg"
	"gonum.org/v1/plot/vg/vgsvg"
)

// Okabe–Ito palette, distinguishable under the common colour-vision
// deficiencies (Okabe & Ito 2008, "Color Universal Design (CUD): how to make
// figures and presentations that are friendly to colorblind people",
// jfly.uni-koeln.de/color/).
var (
	colTreated = color.RGBA{0xD5, 0x5E, 0x00, 0xFF} // vermillion
	colControl = color.RGBA{0x00, 0x72, 0xB2, 0xFF} // blue
	colGood    = color.RGBA{0x00, 0x9E, 0x73, 0xFF} // bluish green
	colWarn    = color.RGBA{0xE6, 0x9F, 0x00, 0xFF} // orange
	colInk     = color.RGBA{0x22, 0x22, 0x22, 0xFF}
	colMuted   = color.RGBA{0x6B, 0x6B, 0x6B, 0xFF}
	colGrid    = color.RGBA{0xE3, 0xE3, 0xE3, 0xFF}
)

// tint is c blended toward white, alpha a of the colour kept (0..1).
func tint(c color.RGBA, a float64) color.RGBA {
	mix := func(v uint8) uint8 { return uint8(float64(v)*a + 255*(1-a) + 0.5) }
	return color.RGBA{mix(c.R), mix(c.G), mix(c.B), 0xFF}
}

// armColor is the colour of arm a (0 control, 1 treated).
func armColor(a int) color.RGBA {
	if a == 1 {
		return colTreated
	}
	return colControl
}

// chart is one rendered figure: a gonum plot, its size and the name used
// for its element id and PNG file.
type chart struct {
	Name  string // "balance", "overlap", "weights", "drift"
	Title string // accessible description
	Plot  *plot.Plot
	W, H  vg.Length
}

// sans is the chart typeface. Liberation Sans ships with gonum/plot, so
// text is measured the same everywhere, and it is metric-compatible with
// Arial and Helvetica, the fallbacks named in the SVG.
var sans = font.Font{Typeface: "Liberation", Variant: "Sans"}

// newPlot returns a plot with heft's chart style: sans-serif text, light
// muted axes, no title (the page's heading names the chart).
func newPlot() *plot.Plot {
	p := plot.New()
	size := func(pt vg.Length) font.Font { return font.From(sans, pt) }
	p.Title.TextStyle.Font = size(13)
	for _, a := range []*plot.Axis{&p.X, &p.Y} {
		a.Label.TextStyle.Font = size(12)
		a.Label.TextStyle.Color = colInk
		a.Tick.Label.Font = size(10.5)
		a.Tick.Label.Color = colInk
		a.Color = colMuted
		a.Tick.Color = colMuted
		a.Padding = vg.Points(4)
	}
	p.Legend.TextStyle.Font = size(10.5)
	p.Legend.Top = true
	return p
}

// textStyle is a chart label style of the given size and colour.
func textStyle(pt vg.Length, c color.Color) text.Style {
	return text.Style{Color: c, Font: font.From(sans, pt), Handler: plot.DefaultTextHandler}
}

// svg renders the chart as an SVG element for inlining in HTML: no XML
// prolog, an id, a role and a title for screen readers, fonts with
// metric-compatible fallbacks, and a width that follows the page.
func (c *chart) svg() (string, error) {
	cv := vgsvg.New(c.W, c.H)
	c.Plot.Draw(draw.New(cv))
	var b bytes.Buffer
	if _, err := cv.WriteTo(&b); err != nil {
		return "", fmt.Errorf("%s chart: %w", c.Name, err)
	}
	s := b.String()
	i := strings.Index(s, "<svg")
	if i < 0 {
		return "", fmt.Errorf("%s chart: the SVG back end wrote no <svg> element", c.Name)
	}
	s = s[i:]
	// Replace the fixed size in points with the page's width; the viewBox
	// keeps the aspect ratio.
	end := strings.Index(s, "viewBox=")
	if end < 0 {
		return "", fmt.Errorf("%s chart: the SVG has no viewBox", c.Name)
	}
	head := fmt.Sprintf(`<svg id="chart-%s" class="chart" role="img" aria-labelledby="chart-%s-title" `, c.Name, c.Name)
	s = head + s[end:]
	if j := strings.Index(s, ">"); j >= 0 {
		s = s[:j+1] + fmt.Sprintf("\n<title id=\"chart-%s-title\">%s</title>", c.Name, htmlEscape(c.Title)) + s[j+1:]
	}
	s = strings.ReplaceAll(s, "font-family:Liberation Sans;", "font-family:'Liberation Sans',Arial,Helvetica,sans-serif;")
	return s, nil
}

// writePNG renders the chart as a PNG at dpi dots per inch.
func (c *chart) writePNG(w io.Writer, dpi int) error {
	cv := vgimg.NewWith(vgimg.UseWH(c.W, c.H), vgimg.UseDPI(dpi), vgimg.UseBackgroundColor(color.White))
	c.Plot.Draw(draw.New(cv))
	if _, err := (vgimg.PngCanvas{Canvas: cv}).WriteTo(w); err != nil {
		return fmt.Errorf("%s chart: %w", c.Name, err)
	}
	return nil
}

// nominalY labels the y axis with names at 0, 1, …; with no names it
// leaves the axis unlabelled (plot.NominalY needs at least one).
func nominalY(p *plot.Plot, names []string) {
	if len(names) == 0 {
		p.Y.Tick.Marker = plot.ConstantTicks{}
		return
	}
	p.NominalY(names...)
}

// niceTicks labels every step of 1, 2 or 5 times a power of ten that
// gives about six intervals over [min, max], with true minus signs.
func niceTicks(min, max float64) []plot.Tick {
	span := max - min
	if !(span > 0) || !finite(span) {
		return nil
	}
	raw := span / 6
	p := math.Pow(10, math.Floor(math.Log10(raw)))
	step := p
	for _, m := range []float64{1, 2, 2.5, 5, 10} {
		if m*p >= raw {
			step = m * p
			break
		}
	}
	var t []plot.Tick
	for v := math.Ceil(min/step) * step; v <= max+step*1e-9; v += step {
		if math.Abs(v) < step*1e-9 {
			v = 0
		}
		t = append(t, plot.Tick{Value: v, Label: strings.Replace(strconv.FormatFloat(v, 'g', 6, 64), "-", "−", 1)})
	}
	return t
}

var htmlEscaper = strings.NewReplacer("&", "&amp;", "<", "&lt;", ">", "&gt;", `"`, "&#34;", "'", "&#39;")

func htmlEscape(s string) string { return htmlEscaper.Replace(s) }
