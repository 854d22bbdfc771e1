// Package curveplot draws curvekeeper's figures with gonum/plot: the
// calibration curve with its confidence band and residual panel, and the
// control chart of a drift series. It takes values and returns encoded bytes
// (SVG or PNG); it knows nothing of HTTP.
//
// A figure supports, and never replaces, the laboratory's review: local
// accreditation, regulation and the method SOP come first, and a qualified
// person reviews results before release. Every figure says so in its footer.
package curveplot

import (
	"bytes"
	"fmt"
	"image/color"

	"gonum.org/v1/plot/font"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgimg"
	"gonum.org/v1/plot/vg/vgsvg"

	"curvekeeper/calib"
)

// Output formats.
const (
	FormatSVG = "svg"
	FormatPNG = "png"
)

// Default figure size and PNG resolution.
const (
	DefaultWidth  = 18 * vg.Centimeter
	DefaultHeight = 14 * vg.Centimeter
	// DPI is the resolution of PNG output: a figure of width w is
	// round(w/inch·DPI) pixels wide.
	DPI = 96
	// maxSide bounds each side of a figure, so that a caller cannot ask
	// for a gigapixel image (1 m at 96 DPI is 3780 px).
	maxSide = 100 * vg.Centimeter
	// margin is the white border around every figure.
	margin = vg.Length(8)
)

// Footer is the caution printed under every figure.
const Footer = "Acceptance is checked against configured criteria; the lab's accreditation, " +
	"regulator and method SOP take precedence. Results need review by a qualified person before release."

// Options selects the output format, the texts and the size of a figure.
// Zero values select defaults: format SVG, 18 cm × 14 cm.
type Options struct {
	Format  string // FormatSVG or FormatPNG; "" means SVG
	Title   string
	Analyte string
	Unit    string // concentration unit, e.g. "ug/L"
	Width   vg.Length
	Height  vg.Length
}

// OptionError reports an option that cannot be drawn with.
type OptionError struct {
	Field  string
	Reason string
}

func (e *OptionError) Error() string {
	return fmt.Sprintf("curveplot: %s: %s", e.Field, e.Reason)
}

// resolve fills in defaults and refuses what cannot be drawn.
func (o Options) resolve() (Options, error) {
	switch o.Format {
	case "":
		o.Format = FormatSVG
	case FormatSVG, FormatPNG:
	default:
		return o, &OptionError{Field: "format", Reason: fmt.Sprintf("%q is not svg or png", o.Format)}
	}
	if o.Width == 0 {
		o.Width = DefaultWidth
	}
	if o.Height == 0 {
		o.Height = DefaultHeight
	}
	for _, s := range []struct {
		name string
		v    vg.Length
	}{{"width", o.Width}, {"height", o.Height}} {
		if !calib.Finite(float64(s.v)) || s.v < 4*vg.Centimeter || s.v > maxSide {
			return o, &OptionError{Field: s.name, Reason: fmt.Sprintf("%.1f cm is outside 4 cm to 100 cm", float64(s.v/vg.Centimeter))}
		}
	}
	return o, nil
}

// canvas is a vector or raster canvas that can encode itself.
type canvas interface {
	vg.CanvasWriterTo
}

func newCanvas(o Options) canvas {
	if o.Format == FormatPNG {
		return vgimg.PngCanvas{Canvas: vgimg.NewWith(vgimg.UseWH(o.Width, o.Height), vgimg.UseDPI(DPI))}
	}
	return vgsvg.New(o.Width, o.Height)
}

// render draws with fn on a fresh canvas of o's format and size and returns
// the encoded bytes. gonum/plot reports some drawing failures by panicking;
// render turns such a panic into an error so that a bad figure never takes
// the service down.
func render(o Options, fn func(dc draw.Canvas) error) (out []byte, err error) {
	c := newCanvas(o)
	defer func() {
		if p := recover(); p != nil {
			out, err = nil, fmt.Errorf("curveplot: drawing failed: %v", p)
		}
	}()
	dc := draw.New(c)
	dc = draw.Crop(dc, margin, -margin, margin, -margin)
	if err := fn(dc); err != nil {
		return nil, err
	}
	var buf bytes.Buffer
	if _, err := c.WriteTo(&buf); err != nil {
		return nil, fmt.Errorf("curveplot: encode %s: %w", o.Format, err)
	}
	return buf.Bytes(), nil
}

// The palette: a dark slate ink for data, a muted blue for the model and
// its band, a brick red for what needs attention. Shapes and dash patterns
// carry every distinction as well, so nothing depends on colour alone.
var (
	inkColor     = color.RGBA{R: 0x2f, G: 0x34, B: 0x3b, A: 0xff}
	modelColor   = color.RGBA{R: 0x1f, G: 0x5f, B: 0x8b, A: 0xff}
	bandColor    = color.RGBA{R: 0xb9, G: 0xd0, B: 0xe3, A: 0xff}
	alertColor   = color.RGBA{R: 0xa3, G: 0x3b, B: 0x2a, A: 0xff}
	warnColor    = color.RGBA{R: 0x9a, G: 0x6b, B: 0x12, A: 0xff}
	guideColor   = color.RGBA{R: 0x8a, G: 0x8f, B: 0x96, A: 0xff}
	gridColor    = color.RGBA{R: 0xd9, G: 0xdd, B: 0xe2, A: 0xff}
	footerColor  = color.RGBA{R: 0x5c, G: 0x63, B: 0x6b, A: 0xff}
	dashWarning  = []vg.Length{vg.Points(6), vg.Points(3)}
	dashAction   = []vg.Length{vg.Points(1.5), vg.Points(2.5)}
	dashBaseline = []vg.Length(nil)
)

// sans is the Liberation Sans face that ships with gonum/plot.
func sans(size vg.Length) font.Font {
	return font.From(font.Font{Typeface: "Liberation", Variant: "Sans"}, size)
}
