package calib

import (
	"errors"
	"math"
	"testing"
)

// TestCurveParametersFixAndStart: a 4PL whose lower asymptote a is fixed
// through Options.Curve keeps a at exactly that value, gains one degree of
// freedom and reports a as fixed with no standard error, and its other
// coefficients equal FitCurve's with the same coefficient held (the
// solver's own fixed-parameter path, checked against NIST elsewhere). A
// start override changes where the solver begins, not the minimum it
// reaches (to 1e-6 relative, the tolerance of the scipy goldens).
func TestCurveParametersFixAndStart(t *testing.T) {
	pts := elisaPoints()
	free, err := Fit(pts, Options{Model: FourPL, Weighting: WeightInvY2})
	if err != nil {
		t.Fatal(err)
	}
	fixed, err := Fit(pts, Options{Model: FourPL, Weighting: WeightInvY2,
		Curve: CurveParameters{Fixed: map[string]float64{"a": 0.04}}})
	if err != nil {
		t.Fatal(err)
	}
	if fixed.Curve.Outcome != "converged" {
		t.Fatalf("outcome %s", fixed.Curve.Outcome)
	}
	if fixed.Coefficients[0] != 0.04 || !fixed.Curve.Fixed[0] || fixed.StandardErrors[0] != 0 {
		t.Errorf("a = %v fixed %v SE %v, want exactly 0.04, fixed, SE 0", fixed.Coefficients[0], fixed.Curve.Fixed[0], fixed.StandardErrors[0])
	}
	if fixed.DF != free.DF+1 {
		t.Errorf("DF %d, want %d", fixed.DF, free.DF+1)
	}
	x, y, w := elisaCurve()
	ref := fitCurveOrFatal(t, x, y, w, CurveOptions{Model: FourPL, Fixed: []float64{0.04, math.NaN(), math.NaN(), math.NaN()}})
	for j := 1; j < 4; j++ {
		if math.Abs(fixed.Coefficients[j]-ref.Coefficients[j]) > 1e-9*math.Abs(ref.Coefficients[j]) {
			t.Errorf("coefficient %d: %v, FitCurve with a held: %v", j, fixed.Coefficients[j], ref.Coefficients[j])
		}
	}
	started, err := Fit(pts, Options{Model: FourPL, Weighting: WeightInvY2,
		Curve: CurveParameters{Start: map[string]float64{"c": 60, "b": 2}}})
	if err != nil {
		t.Fatal(err)
	}
	if started.Curve.Start[2] != 60 || started.Curve.Start[1] != 2 {
		t.Errorf("start %v, want b = 2 and c = 60", started.Curve.Start)
	}
	for j := range free.Coefficients {
		if math.Abs(started.Coefficients[j]-free.Coefficients[j]) > 1e-6*math.Abs(free.Coefficients[j]) {
			t.Errorf("coefficient %d from another start: %v, want %v", j, started.Coefficients[j], free.Coefficients[j])
		}
	}
}

// TestCurveParametersRejected: names outside the model, non-finite
// values, a coefficient both started and fixed, and parameters on a
// straight line are input errors naming the field.
func TestCurveParametersRejected(t *testing.T) {
	pts := elisaPoints()
	for _, c := range []struct {
		model Model
		p     CurveParameters
		field string
	}{
		{FourPL, CurveParameters{Fixed: map[string]float64{"g": 1}}, "options.curve.fixed.g"},
		{FourPL, CurveParameters{Start: map[string]float64{"c": math.Inf(1)}}, "options.curve.start.c"},
		{FourPL, CurveParameters{Start: map[string]float64{"a": 0}, Fixed: map[string]float64{"a": 0}}, "options.curve.start.a"},
		{Linear, CurveParameters{Fixed: map[string]float64{"a": 0}}, "options.curve"},
	} {
		_, err := Fit(pts, Options{Model: c.model, Curve: c.p})
		var ie *InputError
		if !errors.As(err, &ie) || ie.Field != c.field {
			t.Errorf("%s %+v: error %v, want an InputError on %s", c.model, c.p, err, c.field)
		}
	}
}
