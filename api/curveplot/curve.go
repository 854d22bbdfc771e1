package curveplot

import (
	"fmt"
	"image/color"
	"math"
	"strconv"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"

	"curvekeeper/calib"
)

// NoCurveNote is written on the figure of a report without coefficients.
const NoCurveNote = "no curve could be fitted"

// curveSamples is the number of segments the fitted curve and its band are
// drawn with.
const curveSamples = 200

// topFraction is the share of the figure height given to the curve panel.
const topFraction = 0.64

// Curve draws the calibration figure of r: on top the standards (accepted
// readings as filled circles, excluded ones as hollow triangles), the fitted
// curve over the working range extended by 5% each side, and the pointwise
// confidence band of the fitted mean at r.Confidence,
//
//	ŷ(x) ± t(1−α/2; r.DF)·√(f(x)ᵀ·Cov·f(x)),  f(x) = (1, x), (x) or (1, x, x²);
//
// below, the internally studentised residuals of the accepted readings
// against concentration, with a zero line and guides at ±2 and ±3 (common
// practice: |r| > 2 deserves a look, |r| > 3 is an outlier candidate).
//
// A report without coefficients (a curve that could not be fitted) is drawn
// with its standards and the note NoCurveNote. Non-finite values are left
// out of the drawing. It returns an *OptionError for a nil report, an
// inconsistent one (coefficients that do not match the model) or options
// that cannot be drawn.
func Curve(r *calib.Report, o Options) ([]byte, error) {
	if r == nil {
		return nil, &OptionError{Field: "report", Reason: "nil"}
	}
	o, err := o.resolve()
	if err != nil {
		return nil, err
	}
	c, fitted, err := newCurve(r)
	if err != nil {
		return nil, err
	}
	top, bottom, err := curvePanels(r, o, c, fitted)
	if err != nil {
		return nil, err
	}
	return render(o, func(dc draw.Canvas) error {
		stack(drawFooter(dc), top, bottom, topFraction)
		return nil
	})
}

func concentrationLabel(unit string) string {
	if unit == "" {
		return "Concentration"
	}
	return "Concentration (" + unit + ")"
}

func curveTitle(o Options) string {
	switch {
	case o.Title != "":
		return o.Title
	case o.Analyte != "":
		return "Calibration curve: " + o.Analyte
	}
	return "Calibration curve"
}

// curvePanels builds the two plots of the figure.
func curvePanels(r *calib.Report, o Options, c curve, fitted bool) (top, bottom *plot.Plot, err error) {
	xLabel := concentrationLabel(o.Unit)
	top = newPlot(curveTitle(o), xLabel, "Response")
	bottom = newPlot("", xLabel, "Studentised residual")

	// Logistic curves are drawn on a log concentration axis, where a
	// reading at zero has no place.
	logX := r.Curve != nil && r.Curve.LogX
	if logX {
		for _, pl := range []*plot.Plot{top, bottom} {
			pl.X.Scale, pl.X.Tick.Marker = plot.LogScale{}, plot.LogTicks{Prec: -1}
		}
	}
	var accepted, excluded, resid plotter.XYs
	for _, p := range r.Points {
		if !calib.Finite(p.X) || !calib.Finite(p.Y) || (logX && !(p.X > 0)) {
			continue
		}
		if p.Excluded {
			excluded = append(excluded, plotter.XY{X: p.X, Y: p.Y})
			continue
		}
		accepted = append(accepted, plotter.XY{X: p.X, Y: p.Y})
		if fitted && calib.Finite(p.Studentized) {
			resid = append(resid, plotter.XY{X: p.X, Y: p.Studentized})
		}
	}

	if fitted {
		lo, hi := curveDomain(r, accepted)
		if err := addModel(top, r, c, lo, hi); err != nil {
			return nil, nil, err
		}
	}
	if err := addStandards(top, accepted, excluded); err != nil {
		return nil, nil, err
	}
	if !fitted {
		top.Add(newNote(NoCurveNote, 0.85))
	}
	if err := addResiduals(bottom, resid, fitted); err != nil {
		return nil, nil, err
	}
	// Share the concentration axis, so the panels read as one figure.
	xmin, xmax := math.Min(top.X.Min, bottom.X.Min), math.Max(top.X.Max, bottom.X.Max)
	top.X.Min, top.X.Max = xmin, xmax
	bottom.X.Min, bottom.X.Max = xmin, xmax
	return top, bottom, nil
}

// curveDomain is the working range extended by 5% of its span on each side,
// not below zero when the range starts at or above zero. Without a usable
// range it falls back to the span of the accepted standards.
func curveDomain(r *calib.Report, accepted plotter.XYs) (lo, hi float64) {
	lo, hi = r.Range.Low, r.Range.High
	if !calib.Finite(lo) || !calib.Finite(hi) || hi <= lo {
		lo, hi = math.Inf(1), math.Inf(-1)
		for _, p := range accepted {
			lo, hi = math.Min(lo, p.X), math.Max(hi, p.X)
		}
		if !(hi > lo) {
			return 0, 0
		}
	}
	if r.Curve != nil && r.Curve.LogX && lo > 0 {
		// A log axis: 5 % of the span in log x on each side.
		f := math.Pow(hi/lo, 0.05)
		return lo / f, hi * f
	}
	pad := 0.05 * (hi - lo)
	nlo := lo - pad
	if lo >= 0 && nlo < 0 {
		nlo = 0
	}
	return nlo, hi + pad
}

// addModel adds the confidence band and the fitted curve over [lo, hi].
func addModel(p *plot.Plot, r *calib.Report, c curve, lo, hi float64) error {
	if !(hi > lo) {
		return nil
	}
	line := make(plotter.XYs, 0, curveSamples+1)
	upper := make(plotter.XYs, 0, curveSamples+1)
	lower := make(plotter.XYs, 0, curveSamples+1)
	band := c.band
	for i := 0; i <= curveSamples; i++ {
		x := lo + (hi-lo)*float64(i)/curveSamples
		if r.Curve != nil && r.Curve.LogX && lo > 0 {
			x = lo * math.Pow(hi/lo, float64(i)/curveSamples)
		}
		y := c.at(x)
		if !calib.Finite(y) {
			continue
		}
		line = append(line, plotter.XY{X: x, Y: y})
		if h, ok := c.halfWidth(x); ok && band {
			upper = append(upper, plotter.XY{X: x, Y: y + h})
			lower = append(lower, plotter.XY{X: x, Y: y - h})
		} else {
			band = false
		}
	}
	if band && len(upper) > 1 {
		ring := make(plotter.XYs, 0, 2*len(upper))
		ring = append(ring, upper...)
		for i := len(lower) - 1; i >= 0; i-- {
			ring = append(ring, lower[i])
		}
		poly, err := plotter.NewPolygon(ring)
		if err != nil {
			return fmt.Errorf("curveplot: band: %w", err)
		}
		poly.Color = bandColor
		poly.LineStyle.Width = 0
		p.Add(poly)
		p.Legend.Add(confidenceLabel(r.Confidence), poly)
	}
	if len(line) > 1 {
		l, err := plotter.NewLine(line)
		if err != nil {
			return fmt.Errorf("curveplot: curve: %w", err)
		}
		l.Color = modelColor
		l.Width = vg.Points(1.6)
		p.Add(l)
		p.Legend.Add("Fitted curve, "+modelName(r.Model), l)
	}
	return nil
}

func confidenceLabel(conf float64) string {
	return strconv.FormatFloat(100*conf, 'g', 4, 64) + "% confidence band of the mean"
}

func modelName(m calib.Model) string {
	switch m {
	case calib.LinearOrigin:
		return "linear through origin"
	case calib.AverageRF:
		return "average response factor (through origin, slope = mean RF)"
	case calib.Quadratic:
		return "quadratic"
	case calib.FourPL:
		return "four-parameter logistic"
	case calib.FivePL:
		return "five-parameter logistic"
	case calib.Power:
		return "power"
	case calib.ExpSaturation, calib.ExpSaturationOffset:
		return "saturating exponential"
	}
	return "linear"
}

// addStandards adds accepted readings as filled circles and excluded ones
// as hollow triangles, so the difference does not rest on colour.
func addStandards(p *plot.Plot, accepted, excluded plotter.XYs) error {
	if len(accepted) > 0 {
		s, err := plotter.NewScatter(accepted)
		if err != nil {
			return fmt.Errorf("curveplot: standards: %w", err)
		}
		s.GlyphStyle = draw.GlyphStyle{Color: inkColor, Radius: vg.Points(3), Shape: draw.CircleGlyph{}}
		p.Add(s)
		p.Legend.Add("Standards, accepted", s)
	}
	if len(excluded) > 0 {
		s, err := plotter.NewScatter(excluded)
		if err != nil {
			return fmt.Errorf("curveplot: excluded standards: %w", err)
		}
		s.GlyphStyle = draw.GlyphStyle{Color: alertColor, Radius: vg.Points(4.2), Shape: draw.TriangleGlyph{}}
		p.Add(s)
		p.Legend.Add("Standards, excluded", s)
	}
	return nil
}

// addResiduals fills the residual panel: a zero line, guides at ±2 (long
// dashes) and ±3 (dots), and the residuals as filled circles.
func addResiduals(p *plot.Plot, resid plotter.XYs, fitted bool) error {
	ymax := 3.5
	for _, r := range resid {
		ymax = math.Max(ymax, math.Abs(r.Y)*1.08)
	}
	p.Y.Min, p.Y.Max = -ymax, ymax
	ticks := plot.ConstantTicks{{Value: -3, Label: "−3"}, {Value: -2, Label: "−2"}, {Value: 0, Label: "0"},
		{Value: 2, Label: "2"}, {Value: 3, Label: "3"}}
	if ymax > 4.5 {
		edge := math.Floor(ymax)
		ticks = append(ticks, plot.Tick{Value: edge, Label: strconv.FormatFloat(edge, 'f', 0, 64)},
			plot.Tick{Value: -edge, Label: "−" + strconv.FormatFloat(edge, 'f', 0, 64)})
	}
	p.Y.Tick.Marker = ticks
	if !fitted {
		p.Add(newNote("no residuals: "+NoCurveNote, 0.5))
		return nil
	}
	for _, g := range []struct {
		y      float64
		dashes []vg.Length
		col    color.Color
	}{{0, dashBaseline, inkColor}, {2, dashWarning, warnColor}, {-2, dashWarning, warnColor}, {3, dashAction, alertColor}, {-3, dashAction, alertColor}} {
		y := g.y
		f := plotter.NewFunction(func(float64) float64 { return y })
		f.Samples = 2
		f.Width = vg.Points(0.9)
		f.Dashes = g.dashes
		f.Color = g.col
		p.Add(f)
	}
	if len(resid) == 0 {
		return nil
	}
	s, err := plotter.NewScatter(resid)
	if err != nil {
		return fmt.Errorf("curveplot: residuals: %w", err)
	}
	s.GlyphStyle = draw.GlyphStyle{Color: inkColor, Radius: vg.Points(2.6), Shape: draw.CircleGlyph{}}
	p.Add(s)
	return nil
}
