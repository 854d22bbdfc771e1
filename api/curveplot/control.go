package curveplot

import (
	"cmp"
	"fmt"
	"math"
	"slices"
	"time"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"

	"curvekeeper/calib"
)

// Series is one parameter of a run of curves over time with its baseline,
// as drawn on a control chart.
type Series struct {
	Parameter string // e.g. "slope"
	Unit      string // the parameter's unit, e.g. "response per ug/L"; "" for none
	Points    []TrendPoint
	Mean      float64 // baseline centre line
	SD        float64 // baseline standard deviation
}

// TrendPoint is one curve's value of the parameter.
type TrendPoint struct {
	At         time.Time
	Value      float64
	Label      string   // e.g. the curve id; not drawn
	Violations []string // the control rules this value violates, e.g. "1-3s"; empty when in control
}

// ControlChart draws s as a Shewhart control chart (ISO 7870-2): the values
// in time order joined by a thin line, the centre line at Mean, warning
// limits at Mean ± 2·SD (long dashes) and action limits at Mean ± 3·SD
// (dots). A value that violates a rule is drawn as a larger filled square
// instead of a circle; which rules it violates is for the table beside the
// chart (labels on the chart ran into each other and off its right edge).
//
// Values that are not finite are left out. Without a usable baseline
// (SD not finite and positive, or Mean not finite) the chart shows the
// values and a note instead of limits; an empty series draws a note.
func ControlChart(s Series, o Options) ([]byte, error) {
	o, err := o.resolve()
	if err != nil {
		return nil, err
	}
	p, err := controlPlot(s, o)
	if err != nil {
		return nil, err
	}
	return render(o, func(dc draw.Canvas) error {
		legendRight(drawFooter(dc), p)
		return nil
	})
}

func controlTitle(s Series, o Options) string {
	if o.Title != "" {
		return o.Title
	}
	t := "Control chart"
	if s.Parameter != "" {
		t += ": " + s.Parameter
	}
	if o.Analyte != "" {
		t += ", " + o.Analyte
	}
	return t
}

func controlPlot(s Series, o Options) (*plot.Plot, error) {
	yLabel := s.Parameter
	if yLabel == "" {
		yLabel = "Value"
	}
	if s.Unit != "" {
		yLabel += " (" + s.Unit + ")"
	}
	p := newPlot(controlTitle(s, o), "Date (UTC)", yLabel)

	var all, ok, bad plotter.XYs
	tmin, tmax := math.Inf(1), math.Inf(-1)
	for _, pt := range s.Points {
		if !calib.Finite(pt.Value) || pt.At.IsZero() {
			continue
		}
		x := float64(pt.At.Unix())
		tmin, tmax = math.Min(tmin, x), math.Max(tmax, x)
		xy := plotter.XY{X: x, Y: pt.Value}
		all = append(all, xy)
		if len(pt.Violations) > 0 {
			bad = append(bad, xy)
		} else {
			ok = append(ok, xy)
		}
	}
	slices.SortStableFunc(all, func(a, b plotter.XY) int { return cmp.Compare(a.X, b.X) })
	p.X.Tick.Marker = dayTicks{}

	baseline := calib.Finite(s.Mean) && calib.Finite(s.SD) && s.SD > 0
	if baseline {
		addLimits(p, s.Mean, s.SD)
	}
	if len(all) > 1 {
		l, err := plotter.NewLine(all)
		if err != nil {
			return nil, fmt.Errorf("curveplot: series: %w", err)
		}
		l.Color = guideColor
		l.Width = vg.Points(0.8)
		p.Add(l)
	}
	if len(ok) > 0 {
		sc, err := plotter.NewScatter(ok)
		if err != nil {
			return nil, fmt.Errorf("curveplot: series: %w", err)
		}
		sc.GlyphStyle = draw.GlyphStyle{Color: inkColor, Radius: vg.Points(2.8), Shape: draw.CircleGlyph{}}
		p.Add(sc)
		p.Legend.Add("In control", sc)
	}
	if len(bad) > 0 {
		sc, err := plotter.NewScatter(bad)
		if err != nil {
			return nil, fmt.Errorf("curveplot: violations: %w", err)
		}
		sc.GlyphStyle = draw.GlyphStyle{Color: alertColor, Radius: vg.Points(3.6), Shape: draw.BoxGlyph{}}
		p.Add(sc)
		p.Legend.Add("Rule violated", sc)
	}
	switch {
	case len(all) == 0:
		p.Add(newNote("no values in this period", 0.5))
	case !baseline:
		p.Add(newNote("no control limits: the baseline has no positive, finite SD", 0.9))
	}
	// Room at both ends for the markers and their labels; a single instant
	// gets a day either side.
	pad := math.Max(0.03*(tmax-tmin), 0)
	if len(all) == 1 {
		pad = 86400
	}
	if len(all) > 0 {
		p.X.Min, p.X.Max = tmin-pad, tmax+pad
	}
	return p, nil
}

// addLimits draws the centre line and the ±2 SD and ±3 SD limits, each in
// its own dash pattern, and widens the value axis to show them.
func addLimits(p *plot.Plot, mean, sd float64) {
	for _, l := range []struct {
		k      float64
		name   string
		dashes []vg.Length
		width  vg.Length
		warn   bool
	}{
		{0, "Centre (mean)", dashBaseline, 1.2, false},
		{2, "Warning ±2 SD", dashWarning, 1, true},
		{3, "Action ±3 SD", dashAction, 1.3, false},
	} {
		for i, sign := range []float64{1, -1} {
			if l.k == 0 && i == 1 {
				break
			}
			y := mean + sign*l.k*sd
			f := plotter.NewFunction(func(float64) float64 { return y })
			f.Samples = 2
			f.Width = vg.Points(float64(l.width))
			f.Dashes = l.dashes
			switch {
			case l.k == 0:
				f.Color = modelColor
			case l.warn:
				f.Color = warnColor
			default:
				f.Color = alertColor
			}
			p.Add(f)
			if i == 0 {
				p.Legend.Add(l.name, f)
			}
		}
	}
	p.Y.Min = math.Min(p.Y.Min, mean-3.4*sd)
	p.Y.Max = math.Max(p.Y.Max, mean+3.4*sd)
}

// dayTicks labels a time axis (Unix seconds) at UTC midnights every 1, 2,
// 7, 14 or 28 days, whichever gives at most about six labels; a span under
// two days is labelled every 1, 2, 3, 4, 6 or 12 hours instead.
type dayTicks struct{}

func (dayTicks) Ticks(lo, hi float64) []plot.Tick {
	if !calib.Finite(lo) || !calib.Finite(hi) || hi <= lo {
		return nil
	}
	const day = 86400
	span := hi - lo
	format, step := "2006-01-02", float64(day)
	switch {
	case span < 2*day:
		format = "01-02 15:04"
		for _, h := range []float64{1, 2, 3, 4, 6, 12} {
			step = h * 3600
			if span/step <= 6 {
				break
			}
		}
	default:
		for _, d := range []float64{1, 2, 7, 14, 28, 56, 91, 182, 364} {
			step = d * day
			if span/step <= 6 {
				break
			}
		}
	}
	var ticks []plot.Tick
	for v := math.Ceil(lo/step) * step; v <= hi && len(ticks) < 200; v += step {
		ticks = append(ticks, plot.Tick{Value: v, Label: time.Unix(int64(v), 0).UTC().Format(format)})
	}
	return ticks
}
