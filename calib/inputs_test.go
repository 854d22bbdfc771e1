package calib

import (
	"errors"
	"math"
	"reflect"
	"strings"
	"testing"
)

// assertFinite walks v and fails on any NaN or ±Inf float.
func assertFinite(t testing.TB, v any) {
	t.Helper()
	var walk func(path string, v reflect.Value)
	walk = func(path string, v reflect.Value) {
		switch v.Kind() {
		case reflect.Float64:
			if f := v.Float(); math.IsNaN(f) || math.IsInf(f, 0) {
				t.Errorf("%s = %v", path, f)
			}
		case reflect.Ptr, reflect.Interface:
			if !v.IsNil() {
				walk(path, v.Elem())
			}
		case reflect.Struct:
			for i := 0; i < v.NumField(); i++ {
				walk(path+"."+v.Type().Field(i).Name, v.Field(i))
			}
		case reflect.Slice, reflect.Array:
			for i := 0; i < v.Len(); i++ {
				walk(path+"["+itoa(i)+"]", v.Index(i))
			}
		}
	}
	walk("", reflect.ValueOf(v))
}

func TestFitRejectsBadInput(t *testing.T) {
	good := photometerPoints()
	with := func(f func([]Point) []Point) []Point {
		p := append([]Point(nil), good...)
		return f(p)
	}
	tests := []struct {
		name  string
		pts   []Point
		opt   Options
		field string
	}{
		{"no points", nil, Options{}, "points"},
		{"NaN y", with(func(p []Point) []Point { p[3].Y = math.NaN(); return p }), Options{}, "points[3].y"},
		{"Inf x", with(func(p []Point) []Point { p[5].X = math.Inf(1); return p }), Options{}, "points[5].x"},
		{"-Inf y", with(func(p []Point) []Point { p[0].Y = math.Inf(-1); return p }), Options{}, "points[0].y"},
		{"negative concentration", with(func(p []Point) []Point { p[2].X = -1; return p }), Options{}, "points[2].x"},
		{"fewer points than parameters", good[:2], Options{Model: Quadratic}, "points"},
		{"no residual df", []Point{{X: 1, Y: 1}, {X: 2, Y: 2}}, Options{}, "points"},
		{"one level only", []Point{{X: 1, Y: 1}, {X: 1, Y: 2}, {X: 1, Y: 3}}, Options{}, "points"},
		{"quadratic with two levels", []Point{{X: 1, Y: 1}, {X: 1, Y: 2}, {X: 2, Y: 3}, {X: 2, Y: 4}}, Options{Model: Quadratic}, "points"},
		{"all responses equal", []Point{{X: 1, Y: 5}, {X: 2, Y: 5}, {X: 3, Y: 5}}, Options{}, "points"},
		{"all excluded", []Point{{X: 1, Y: 1, Excluded: true}}, Options{}, "points"},
		{"level at two concentrations", []Point{{Level: "A", X: 1, Y: 1}, {Level: "A", X: 2, Y: 2}, {X: 3, Y: 3}}, Options{}, "points[1].level"},
		{"unknown model", good, Options{Model: "cubic"}, "options.model"},
		{"unknown weighting", good, Options{Weighting: "1/z"}, "options.weighting"},
		{"confidence 1", good, Options{Confidence: 1}, "options.confidence"},
		{"confidence negative", good, Options{Confidence: -0.5}, "options.confidence"},
		{"confidence NaN", good, Options{Confidence: math.NaN()}, "options.confidence"},
		{"1/s^2 without replicates", []Point{{X: 1, Y: 1}, {X: 2, Y: 2.1}, {X: 3, Y: 2.9}}, Options{Weighting: WeightInvS2}, "options.weighting"},
		{"bad policy alpha", good, Options{Policy: func() Policy { p := DefaultPolicy(); p.MandelAlpha = 2; return p }()}, "options.policy.mandel_alpha"},
		{"unknown mandatory check", good, Options{Policy: func() Policy { p := DefaultPolicy(); p.Mandatory = []string{"r_squared", "vibes"}; return p }()}, "options.policy.mandatory[1]"},
		{"tiny weights overflow", []Point{{X: 1e-200, Y: 1}, {X: 1, Y: 2}, {X: 2, Y: 3.1}}, Options{Weighting: WeightInvX2}, "points"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			rep, err := Fit(tc.pts, tc.opt)
			var ie *InputError
			if !errors.As(err, &ie) {
				t.Fatalf("got report %v, err %v; want *InputError", rep != nil, err)
			}
			if got, want := ie.Field, tc.field; got != want {
				t.Errorf("field: got %q, want %q (%v)", got, want, err)
			}
		})
	}
}

func TestFitWeightsRejectsBadWeights(t *testing.T) {
	pts := photometerPoints()
	tests := []struct {
		name  string
		w     []float64
		field string
	}{
		{"zero weight", append([]float64{0}, make16(1)[1:]...), "weights[0]"},
		{"negative weight", append(make16(1)[:15], -1), "weights[15]"},
		{"NaN weight", append(make16(1)[:15], math.NaN()), "weights[15]"},
		{"mismatched lengths", make16(1)[:10], "weights"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			_, err := fitWeights(pts, Options{}, tc.w)
			var ie *InputError
			if !errors.As(err, &ie) || ie.Field != tc.field {
				t.Fatalf("got %v, want *InputError on %s", err, tc.field)
			}
		})
	}
}

func make16(v float64) []float64 {
	w := make([]float64, 16)
	for i := range w {
		w[i] = v
	}
	return w
}

func TestPredictRejectsBadInput(t *testing.T) {
	rep := fitOrFatal(t, photometerPoints(), Options{Weighting: WeightInvX2})
	tests := []struct {
		name       string
		ys         []float64
		dil, conf  float64
		field      string
		report     *Report
		wantReport bool
	}{
		{name: "no readings", ys: nil, field: "responses"},
		{name: "NaN reading", ys: []float64{1, math.NaN()}, field: "responses[1]"},
		{name: "Inf reading", ys: []float64{math.Inf(1)}, field: "responses[0]"},
		{name: "negative dilution", ys: []float64{1}, dil: -2, field: "dilution"},
		{name: "NaN dilution", ys: []float64{1}, dil: math.NaN(), field: "dilution"},
		{name: "confidence 1", ys: []float64{1}, conf: 1, field: "confidence"},
		{name: "confidence 1.5", ys: []float64{1}, conf: 1.5, field: "confidence"},
		{name: "failed report", ys: []float64{1}, field: "report.coefficients",
			report: FailedReport(photometerPoints()[:1], Options{}, errors.New("one level"))},
		{name: "nil report", ys: []float64{1}, field: "report", report: nil, wantReport: true},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			r := rep
			if tc.report != nil || tc.wantReport {
				r = tc.report
			}
			_, err := r.Predict(tc.ys, tc.dil, tc.conf)
			var ie *InputError
			if !errors.As(err, &ie) || ie.Field != tc.field {
				t.Fatalf("got %v, want *InputError on %s", err, tc.field)
			}
		})
	}
}

// TestFailedReport: a run that cannot be fitted still yields a complete,
// finite report with verdict fail and reasons.
func TestFailedReport(t *testing.T) {
	tests := []struct {
		name          string
		pts           []Point
		minLevelsPass bool
	}{
		{"one level", []Point{{Level: "A", X: 5, Y: 1.1}, {Level: "A", X: 5, Y: 1.2}}, false},
		{"all responses equal", []Point{{X: 1, Y: 2}, {X: 2, Y: 2}, {X: 3, Y: 2}, {X: 4, Y: 2}, {X: 5, Y: 2}, {X: 6, Y: 2}}, true},
		{"non-finite listed as zero", []Point{{X: math.NaN(), Y: 1}, {X: 1, Y: math.Inf(1)}}, false},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			_, cause := Fit(tc.pts, Options{})
			if cause == nil {
				t.Fatal("Fit succeeded; the case should not be fittable")
			}
			r := FailedReport(tc.pts, Options{}, cause)
			assertFinite(t, r)
			if r.Verdict != "fail" {
				t.Errorf("verdict %q, want fail", r.Verdict)
			}
			if len(r.Points) != len(tc.pts) || len(r.Checks) != len(checkNames) || len(r.Cautions) == 0 {
				t.Fatalf("points %d, checks %d, cautions %d", len(r.Points), len(r.Checks), len(r.Cautions))
			}
			for _, c := range r.Checks {
				if c.Name == CheckMinLevels {
					if !c.Computed || c.Passed != tc.minLevelsPass {
						t.Errorf("min_levels computed %v passed %v, want passed %v", c.Computed, c.Passed, tc.minLevelsPass)
					}
					continue
				}
				if c.Computed || c.Passed || !strings.Contains(c.Detail, cause.Error()) {
					t.Errorf("%s: computed %v passed %v detail %q; want not computed, naming %q", c.Name, c.Computed, c.Passed, c.Detail, cause)
				}
			}
		})
	}
}
