package curveplot

import (
	"bytes"
	"encoding/xml"
	"errors"
	"flag"
	"image/png"
	"io"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"gonum.org/v1/plot/vg"

	"curvekeeper/calib"
)

var update = flag.Bool("update", false, "write the sample figures to testdata")

// svgText parses b as XML and returns the text of its elements, joined by
// newlines; it fails the test if b is not well-formed.
func svgText(t testing.TB, b []byte) string {
	t.Helper()
	d := xml.NewDecoder(bytes.NewReader(b))
	d.Strict = true
	var texts []string
	root := ""
	for {
		tok, err := d.Token()
		if err == io.EOF {
			break
		}
		if err != nil {
			t.Fatalf("SVG is not well-formed XML: %v", err)
		}
		switch tk := tok.(type) {
		case xml.StartElement:
			if root == "" {
				root = tk.Name.Local
			}
		case xml.CharData:
			if s := strings.TrimSpace(string(tk)); s != "" {
				texts = append(texts, s)
			}
		}
	}
	if root != "svg" {
		t.Fatalf("root element %q, want svg", root)
	}
	return strings.Join(texts, "\n")
}

// pixels is the PNG size of a length at DPI.
func pixels(l vg.Length) int { return int(float64(l/vg.Inch)*DPI + 0.5) }

func checkPNG(t testing.TB, b []byte, w, h vg.Length) {
	t.Helper()
	img, err := png.Decode(bytes.NewReader(b))
	if err != nil {
		t.Fatalf("PNG does not decode: %v", err)
	}
	gotW, gotH := img.Bounds().Dx(), img.Bounds().Dy()
	if gotW != pixels(w) || gotH != pixels(h) {
		t.Errorf("PNG is %d×%d px, want %d×%d", gotW, gotH, pixels(w), pixels(h))
	}
}

// writeSample saves a figure to testdata with -update, else to a
// temporary directory, and returns the path.
func writeSample(t *testing.T, name string, b []byte) string {
	t.Helper()
	dir := t.TempDir()
	if *update {
		dir = "testdata"
		if err := os.MkdirAll(dir, 0o755); err != nil {
			t.Fatal(err)
		}
	}
	path := filepath.Join(dir, name)
	if err := os.WriteFile(path, b, 0o644); err != nil {
		t.Fatal(err)
	}
	return path
}

func TestCurveSVG(t *testing.T) {
	r := linearReport(t, sixteenStandards)
	b, err := Curve(r, Options{Format: FormatSVG, Title: "Nitrate, IC-2 — run 2026-03-02", Analyte: "nitrate", Unit: "ug/L"})
	if err != nil {
		t.Fatalf("Curve: %v", err)
	}
	writeSample(t, "sample_curve.svg", b)
	got := svgText(t, b)
	for _, want := range []string{
		"Nitrate, IC-2 — run 2026-03-02",
		"Concentration (ug/L)",
		"Response",
		"Studentised residual",
		"Standards, accepted",
		"Standards, excluded",
		"Fitted curve, linear",
		"95% confidence band of the mean",
		"the lab's accreditation, regulator and method SOP take precedence.", // footer, line 1
		"Results need review by a qualified person before release.",          // footer, line 2
	} {
		if !strings.Contains(got, want) {
			t.Errorf("SVG text lacks %q", want)
		}
	}
	if strings.Contains(got, NoCurveNote) {
		t.Errorf("SVG of a fitted curve says %q", NoCurveNote)
	}
	if bytes.Contains(b, []byte("NaN")) {
		t.Error("SVG contains NaN")
	}
}

func TestCurvePNG(t *testing.T) {
	r := linearReport(t, sixteenStandards)
	tests := []struct {
		name string
		w, h vg.Length
		save bool
	}{
		{"default size", 0, 0, true},
		{"wide", 24 * vg.Centimeter, 12 * vg.Centimeter, false},
		{"small", 10 * vg.Centimeter, 8 * vg.Centimeter, false},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			b, err := Curve(r, Options{Format: FormatPNG, Analyte: "nitrate", Unit: "ug/L", Width: tt.w, Height: tt.h})
			if err != nil {
				t.Fatalf("Curve: %v", err)
			}
			w, h := tt.w, tt.h
			if w == 0 {
				w, h = DefaultWidth, DefaultHeight
			}
			checkPNG(t, b, w, h)
			if tt.save {
				t.Logf("sample PNG: %s", writeSample(t, "sample_curve.png", b))
			}
		})
	}
}

// Every model draws, with its own legend label.
func TestCurveModels(t *testing.T) {
	tests := []struct {
		name  string
		model calib.Model
		coef  []float64
		cov   [][]float64
		label string
	}{
		{"origin", calib.LinearOrigin, []float64{0.121}, [][]float64{{4e-7}}, "Fitted curve, linear through origin"},
		{"quadratic", calib.Quadratic, []float64{0.002, 0.125, -0.00021},
			[][]float64{{1e-5, -4e-7, 5e-9}, {-4e-7, 6e-8, -9e-10}, {5e-9, -9e-10, 1.6e-11}}, "Fitted curve, quadratic"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			r := linearReport(t, sixteenStandards)
			r.Model, r.Coefficients, r.Covariance = tt.model, tt.coef, tt.cov
			b, err := Curve(r, Options{Unit: "ug/L"})
			if err != nil {
				t.Fatalf("Curve: %v", err)
			}
			got := svgText(t, b)
			for _, want := range []string{tt.label, "95% confidence band of the mean"} {
				if !strings.Contains(got, want) {
					t.Errorf("SVG text lacks %q", want)
				}
			}
		})
	}
}

func TestCurveFailedReport(t *testing.T) {
	for _, format := range []string{FormatSVG, FormatPNG} {
		t.Run(format, func(t *testing.T) {
			b, err := Curve(failedReport(), Options{Format: format, Analyte: "nitrate", Unit: "mg/L"})
			if err != nil {
				t.Fatalf("Curve of a failed report: %v", err)
			}
			if format == FormatPNG {
				checkPNG(t, b, DefaultWidth, DefaultHeight)
				return
			}
			got := svgText(t, b)
			for _, want := range []string{NoCurveNote, "Standards, accepted", "Concentration (mg/L)"} {
				if !strings.Contains(got, want) {
					t.Errorf("SVG text lacks %q", want)
				}
			}
			if strings.Contains(got, "Fitted curve") {
				t.Error("failed report drawn with a fitted curve")
			}
		})
	}
	// A failed report with no readings at all still draws.
	if _, err := Curve(&calib.Report{Model: calib.Linear}, Options{}); err != nil {
		t.Errorf("Curve of an empty report: %v", err)
	}
}

// NaN and infinite values anywhere in a report are left out of the drawing:
// no error, and no NaN in the SVG.
func TestCurveNonFinite(t *testing.T) {
	nan, inf := math.NaN(), math.Inf(1)
	tests := []struct {
		name string
		edit func(r *calib.Report)
		note bool // the figure says no curve could be fitted
	}{
		{"NaN response", func(r *calib.Report) { r.Points[3].Y = nan }, false},
		{"infinite concentration", func(r *calib.Report) { r.Points[0].X = inf }, false},
		{"NaN studentised residual", func(r *calib.Report) { r.Points[2].Studentized = nan }, false},
		{"NaN covariance", func(r *calib.Report) { r.Covariance[1][1] = nan }, false},
		{"negative variance", func(r *calib.Report) { r.Covariance = [][]float64{{-1, 0}, {0, -1}} }, false},
		{"NaN range", func(r *calib.Report) { r.Range = calib.Range{Low: nan, High: inf} }, false},
		{"NaN coefficient", func(r *calib.Report) { r.Coefficients[1] = nan }, true},
		{"huge slope", func(r *calib.Report) { r.Coefficients[1] = 1e308; r.Range.High = 1e10 }, false},
		{"everything NaN", func(r *calib.Report) {
			for i := range r.Points {
				r.Points[i].X, r.Points[i].Y = nan, nan
			}
			r.Coefficients = []float64{nan, nan}
		}, true},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			r := linearReport(t, sixteenStandards)
			tt.edit(r)
			b, err := Curve(r, Options{Unit: "ug/L"})
			if err != nil {
				t.Fatalf("Curve: %v", err)
			}
			if bytes.Contains(b, []byte("NaN")) || bytes.Contains(b, []byte("Inf")) {
				t.Error("SVG contains NaN or Inf")
			}
			if got := strings.Contains(svgText(t, b), NoCurveNote); got != tt.note {
				t.Errorf("note %q shown: %v, want %v", NoCurveNote, got, tt.note)
			}
			if _, err := Curve(r, Options{Format: FormatPNG}); err != nil {
				t.Errorf("Curve PNG: %v", err)
			}
		})
	}
}

func TestCurveErrors(t *testing.T) {
	good := linearReport(t, sixteenStandards)
	bad := *good
	bad.Coefficients = []float64{1, 2, 3}
	tests := []struct {
		name  string
		r     *calib.Report
		o     Options
		field string
	}{
		{"nil report", nil, Options{}, "report"},
		{"format", good, Options{Format: "gif"}, "format"},
		{"width NaN", good, Options{Width: vg.Length(math.NaN())}, "width"},
		{"height too small", good, Options{Height: vg.Millimeter}, "height"},
		{"width too large", good, Options{Width: 10 * vg.Inch * 100}, "width"},
		{"coefficients", &bad, Options{}, "report.coefficients"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			_, err := Curve(tt.r, tt.o)
			var oe *OptionError
			if !errors.As(err, &oe) || oe.Field != tt.field {
				t.Errorf("got error %v, want *OptionError for %q", err, tt.field)
			}
		})
	}
}

func BenchmarkCurveSVG16(b *testing.B) {
	r := linearReport(b, sixteenStandards)
	b.ReportAllocs()
	for b.Loop() {
		if _, err := Curve(r, Options{Format: FormatSVG, Analyte: "nitrate", Unit: "ug/L"}); err != nil {
			b.Fatal(err)
		}
	}
}

func BenchmarkCurvePNG16(b *testing.B) {
	r := linearReport(b, sixteenStandards)
	b.ReportAllocs()
	for b.Loop() {
		if _, err := Curve(r, Options{Format: FormatPNG, Analyte: "nitrate", Unit: "ug/L"}); err != nil {
			b.Fatal(err)
		}
	}
}
