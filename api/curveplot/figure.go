package curveplot

import (
	"image/color"
	"strings"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/text"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
)

// newPlot returns a plot in the house look: Liberation Sans throughout,
// a light grid behind the data, the legend at the top left.
func newPlot(title, xLabel, yLabel string) *plot.Plot {
	p := plot.New()
	p.Title.Text = title
	p.Title.TextStyle.Font = sans(12)
	p.Title.TextStyle.Color = inkColor
	p.Title.Padding = vg.Points(6)
	for _, a := range []*plot.Axis{&p.X, &p.Y} {
		a.Label.TextStyle.Font = sans(10)
		a.Label.TextStyle.Color = inkColor
		a.Tick.Label.Font = sans(9)
		a.Tick.Label.Color = inkColor
		a.LineStyle.Color = inkColor
		a.Tick.LineStyle.Color = inkColor
	}
	p.X.Label.Text = xLabel
	p.Y.Label.Text = yLabel
	p.Legend.TextStyle.Font = sans(9)
	p.Legend.TextStyle.Color = inkColor
	p.Legend.Top = true
	p.Legend.Left = true
	p.Legend.XOffs = vg.Points(6)
	p.Legend.YOffs = -vg.Points(4)
	p.Legend.ThumbnailWidth = vg.Points(18)
	p.Legend.Padding = vg.Points(2.5)
	p.X.Tick.Marker = niceTicks{n: 6}
	p.Y.Tick.Marker = niceTicks{n: 5}
	g := plotter.NewGrid()
	g.Vertical.Color = gridColor
	g.Horizontal.Color = gridColor
	p.Add(g)
	return p
}

// note is a Plotter that writes a short message across the data area, at
// the fraction yFrac of its height, on a translucent white box so that it
// reads over data and grid.
type note struct {
	text  string
	yFrac float64
	style text.Style
}

func newNote(s string, yFrac float64) note {
	return note{text: s, yFrac: yFrac, style: text.Style{
		Color:   alertColor,
		Font:    sans(11),
		XAlign:  draw.XCenter,
		YAlign:  draw.YCenter,
		Handler: plot.DefaultTextHandler,
	}}
}

func (n note) Plot(c draw.Canvas, _ *plot.Plot) {
	at := vg.Point{X: c.Center().X, Y: c.Min.Y + vg.Length(n.yFrac)*(c.Max.Y-c.Min.Y)}
	w, h := n.style.Width(n.text)/2+vg.Points(6), n.style.Height(n.text)/2+vg.Points(3)
	c.FillPolygon(color.NRGBA{R: 0xff, G: 0xff, B: 0xff, A: 0xe0}, []vg.Point{
		{X: at.X - w, Y: at.Y - h}, {X: at.X + w, Y: at.Y - h}, {X: at.X + w, Y: at.Y + h}, {X: at.X - w, Y: at.Y + h},
	})
	c.FillText(n.style, at, n.text)
}

// legendRight draws p with its legend outside the data area, in a column
// on the right of dc, so that the legend never hides data or limits.
func legendRight(dc draw.Canvas, p *plot.Plot) {
	lg := p.Legend
	p.Legend = plot.NewLegend()
	lg.Top, lg.Left = true, true
	lg.XOffs, lg.YOffs = 0, 0
	w := lg.Rectangle(dc).Size().X + vg.Points(10)
	pc := draw.Crop(dc, 0, -w, 0, 0)
	p.Draw(pc)
	dataTop := p.DataCanvas(pc).Max.Y
	lc := draw.Crop(dc, dc.Max.X-dc.Min.X-w+vg.Points(10), 0, 0, dataTop-dc.Max.Y)
	lg.Draw(lc)
}

// drawFooter writes Footer along the bottom of dc and returns the canvas
// above it.
func drawFooter(dc draw.Canvas) draw.Canvas {
	sty := text.Style{
		Color:   footerColor,
		Font:    sans(7),
		XAlign:  draw.XCenter,
		YAlign:  draw.YBottom,
		Handler: plot.DefaultTextHandler,
	}
	txt := Footer
	if sty.Width(txt) > dc.Max.X-dc.Min.X {
		txt = strings.Replace(txt, ". ", ".\n", 1)
	}
	h := sty.Height(txt) + vg.Points(6)
	dc.FillText(sty, vg.Point{X: dc.Center().X, Y: dc.Min.Y}, txt)
	return draw.Crop(dc, 0, 0, h, 0)
}

// stack draws top above bottom in dc, giving top the fraction frac of the
// height, with the two data areas aligned left and right so that their
// concentration axes line up. It is plot.Align for two rows of unequal
// height, built on the same Plot.DataCanvas measure.
func stack(dc draw.Canvas, top, bottom *plot.Plot, frac float64) {
	h := dc.Max.Y - dc.Min.Y
	split := dc.Max.Y - vg.Length(frac)*h
	gap := vg.Points(4)
	tc := draw.Crop(dc, 0, 0, split-dc.Min.Y+gap/2, 0)
	bc := draw.Crop(dc, 0, 0, 0, -(dc.Max.Y - split + gap/2))
	td, bd := top.DataCanvas(tc), bottom.DataCanvas(bc)
	left := max(td.Min.X-tc.Min.X, bd.Min.X-bc.Min.X)
	right := max(tc.Max.X-td.Max.X, bc.Max.X-bd.Max.X)
	tc = draw.Crop(tc, left-(td.Min.X-tc.Min.X), -(right - (tc.Max.X - td.Max.X)), 0, 0)
	bc = draw.Crop(bc, left-(bd.Min.X-bc.Min.X), -(right - (bc.Max.X - bd.Max.X)), 0, 0)
	top.Draw(tc)
	bottom.Draw(bc)
}
