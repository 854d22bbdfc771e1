package calib

import (
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"testing"
)

// elisaPoints is elisaCurve as calibrator readings, levels C1..C8.
func elisaPoints() []Point {
	x, y, _ := elisaCurve()
	pts := make([]Point, len(x))
	for i := range x {
		pts[i] = Point{Level: "C" + itoa(i/2+1), X: x[i], Y: y[i]}
	}
	return pts
}

// TestCurveReportBandInversionGolden: the 1/y²-weighted 4PL report's
// coefficients and its inverse-prediction intervals against
// testdata/golden/scipy_band_4pl.json (testdata/gen/make_golden_band.py:
// scipy curve_fit and brentq on the same band). Tolerances: parameters
// 1e-6 relative (both solvers stop near the same minimum, as in
// TestScipyCurvesGolden); interval ends 1e-5 relative, since they move with
// the parameters and the covariance (1e-4 there, but the band's width
// enters the ends only at the scale of the interval's half-width, about a
// tenth of x̂0).
func TestCurveReportBandInversionGolden(t *testing.T) {
	raw, err := os.ReadFile(filepath.Join("..", "testdata", "golden", "scipy_band_4pl.json"))
	if err != nil {
		t.Fatal(err)
	}
	var g struct {
		Params      []float64 `json:"params"`
		Predictions []struct {
			Readings []float64 `json:"readings"`
			XHat     float64   `json:"x_hat"`
			Low      float64   `json:"low"`
			High     *float64  `json:"high"`
		} `json:"predictions"`
	}
	if err := json.Unmarshal(raw, &g); err != nil {
		t.Fatal(err)
	}
	r, err := Fit(elisaPoints(), Options{Model: FourPL, Weighting: WeightInvY2})
	if err != nil {
		t.Fatal(err)
	}
	if r.Curve == nil || r.Curve.Outcome != "converged" {
		t.Fatalf("curve details %+v", r.Curve)
	}
	rel := func(a, b float64) float64 { return math.Abs(a-b) / math.Abs(b) }
	for j, p := range g.Params {
		if e := rel(r.Coefficients[j], p); e > 1e-6 {
			t.Errorf("coefficient %s = %v, scipy %v (rel %g)", r.Curve.ParameterNames[j], r.Coefficients[j], p, e)
		}
	}
	for _, gp := range g.Predictions {
		pr, err := r.Predict(gp.Readings, 1, 0.95)
		if err != nil {
			t.Fatal(err)
		}
		if pr.Method != "band_inversion" {
			t.Errorf("method %q", pr.Method)
		}
		if e := rel(pr.Concentration, gp.XHat); e > 1e-6 {
			t.Errorf("%v: x̂0 %v, scipy %v", gp.Readings, pr.Concentration, gp.XHat)
		}
		if e := rel(pr.Interval.Low, gp.Low); e > 1e-5 {
			t.Errorf("%v: low %v, scipy %v (rel %g)", gp.Readings, pr.Interval.Low, gp.Low, e)
		}
		if gp.High == nil {
			if !pr.Interval.HighOpen {
				t.Errorf("%v: upper bound should be open", gp.Readings)
			}
		} else if e := rel(pr.Interval.High, *gp.High); !pr.Interval.Bounded || e > 1e-5 {
			t.Errorf("%v: high %v, scipy %v (rel %g)", gp.Readings, pr.Interval.High, *gp.High, e)
		}
	}
}

// TestCurveReportChecks: the checks of a good 4PL pass, and each rule
// fails where its source says it must.
func TestCurveReportChecks(t *testing.T) {
	r, err := Fit(elisaPoints(), Options{Model: FourPL, Weighting: WeightInvY2})
	if err != nil {
		t.Fatal(err)
	}
	for _, name := range []string{CheckConvergence, CheckMinLevels, CheckBackCalculation, CheckMonotonic, CheckLackOfFit} {
		if c := checkByName(t, r, name); !c.Computed || !c.Passed {
			t.Errorf("%s: %+v", name, c)
		}
	}
	if r.Verdict != "pass" {
		t.Errorf("verdict %s", r.Verdict)
	}
	// Precision profile: 33 points; the working range lies inside the range.
	cd := r.Curve
	if len(cd.Profile) != 33 || !cd.HasWorkingRange || cd.WorkingRange.Low < r.Range.Low || cd.WorkingRange.High > r.Range.High {
		t.Errorf("profile %d points, working range %+v (has %v), range %+v", len(cd.Profile), cd.WorkingRange, cd.HasWorkingRange, r.Range)
	}
	// ICH M10 ligand-binding rule: the top calibrator read 30 % high in
	// both wells lies outside ±25 % (ULOQ), and a second level (C4, +35 %
	// response) outside ±20 %: 6 of 8 levels is 75 %, still passing; a
	// third failing level drops to 62.5 % and fails.
	bad := elisaPoints()
	for _, i := range []int{6, 7, 10, 11, 8, 9} {
		bad[i].Y *= 1.35
	}
	rb, err := Fit(bad, Options{Model: FourPL, Weighting: WeightInvY2})
	if err != nil {
		t.Fatal(err)
	}
	if c := checkByName(t, rb, CheckBackCalculation); !c.Computed || c.Passed || c.Statistic >= 0.75 {
		t.Errorf("back-calculation should fail: %+v", c)
	}
	// Anchors: a level labelled anchor… is fitted but not judged; with
	// two levels turned into anchors only six are judged.
	an := elisaPoints()
	an[0].Level, an[1].Level = "anchor-low", "anchor-low"
	ra, err := Fit(an, Options{Model: FourPL, Weighting: WeightInvY2})
	if err != nil {
		t.Fatal(err)
	}
	if len(ra.Curve.Anchors) != 1 || ra.Range.Low != 1 || ra.N != 16 {
		t.Errorf("anchors %v, range %+v, n %d", ra.Curve.Anchors, ra.Range, ra.N)
	}
}

// TestCurveReportPowerOfMean: θ is estimated from the replicates and the
// loop ends; with the level SDs of elisaCurve (which grow with the
// response) θ lies in (0, 2], and the fit with θ = 1 fixed (1/y²) is a
// different weighting of the same data. A response above the upper
// asymptote is flagged, never NaN.
func TestCurveReportPowerOfMean(t *testing.T) {
	r, err := Fit(elisaPoints(), Options{Model: FourPL, Weighting: WeightVarPower})
	if err != nil {
		t.Fatal(err)
	}
	cd := r.Curve
	if !(cd.Theta > 0 && cd.Theta <= 2) || cd.ThetaIterations < 1 || cd.ThetaIterations > 20 || cd.ThetaMethod == "" {
		t.Errorf("θ %v after %d rounds (%s)", cd.Theta, cd.ThetaIterations, cd.ThetaMethod)
	}
	// θ is the slope of ln s on ln|ŷ| at the final fit: recompute it.
	var u, v []float64
	for l := 0; l < 8; l++ {
		y1, y2 := r.Points[2*l].Y, r.Points[2*l+1].Y
		s := math.Abs(y1-y2) / math.Sqrt2
		u = append(u, math.Log(math.Abs(r.Points[2*l].Fitted)))
		v = append(v, math.Log(s))
	}
	_, b1, _ := lineFit(u, v)
	if math.Abs(min(max(b1, 0), 2)-cd.Theta) > 1e-3 {
		t.Errorf("θ %v, slope at the final fit %v", cd.Theta, b1)
	}
	pr, err := r.Predict([]float64{5}, 1, 0)
	if err != nil {
		t.Fatal(err)
	}
	if pr.HasEstimate() || pr.Flags[0] != FlagAboveAsymptote {
		t.Errorf("flags %v", pr.Flags)
	}
	if _, err := Fit(elisaPoints(), Options{Model: FourPL, Weighting: WeightInvX2}); err == nil {
		t.Error("1/x² is not offered for curves")
	}
	s2, err := Fit(elisaPoints(), Options{Model: FourPL, Weighting: WeightInvS2})
	if err != nil || s2.Curve.Outcome != "converged" {
		t.Fatal(err)
	}
}

// TestCurveProfileMatchesPrediction: each point of the precision profile
// (whose 4PL grid walks geometric sequences, with its variance written
// out, instead of evaluating exponentials) is the CV of the delta-method
// standard error that Predict reports, through its own evaluation of the
// curve, for the mean of Replicates readings at the curve's response
// there; the grid's x are e^(ln x_low + i·Δ) to rounding. The 4PL under
// every weighting, the 5PL (the general path) under 1/y².
func TestCurveProfileMatchesPrediction(t *testing.T) {
	cases := []struct {
		m Model
		w Weighting
	}{{FourPL, WeightNone}, {FourPL, WeightInvY2}, {FourPL, WeightInvS2}, {FourPL, WeightVarPower}, {FivePL, WeightInvY2}}
	for _, tc := range cases {
		m := tc.m
		r, err := Fit(elisaPoints(), Options{Model: m, Weighting: tc.w})
		if err != nil {
			t.Fatal(err)
		}
		cd := r.Curve
		c := curveOf(m)
		lo, hi := math.Log(r.Range.Low), math.Log(r.Range.High)
		for i, pp := range cd.Profile {
			want := math.Exp(lo + (hi-lo)*float64(i)/float64(len(cd.Profile)-1))
			if !closeTo(pp.X, want, 1e-13, 0) {
				t.Errorf("%s point %d: x %v, want %v", m, i, pp.X, want)
			}
			y := c.Eval(pp.X, r.Coefficients, nil)
			ys := make([]float64, cd.Replicates)
			for k := range ys {
				ys[k] = y
			}
			pr, err := r.Predict(ys, 1, 0)
			if err != nil || !pp.OK {
				t.Fatalf("%s point %d: %v (ok %v)", m, i, err, pp.OK)
			}
			if cv := 100 * pr.StandardError / pr.Concentration; !closeTo(pp.CVPct, cv, 1e-9, 0) {
				t.Errorf("%s %s point %d (x = %v): profile CV %v %%, prediction %v %%", m, tc.w, i, pp.X, pp.CVPct, cv)
			}
		}
	}
}

// TestCurveReportPointsMatchCurve: every point of a 4PL report, fitted or
// excluded, carries the curve's value at its concentration (to 1e-12 of
// its response) and a back-calculated value that the curve maps back to
// its response; excluded readings have weight 0, and the leverages of the
// fitted readings sum to the number of coefficients (the trace of the hat
// matrix, common least-squares algebra).
func TestCurveReportPointsMatchCurve(t *testing.T) {
	pts := elisaPoints()
	pts[5].Excluded, pts[10].Excluded = true, true
	r, err := Fit(pts, Options{Model: FourPL, Weighting: WeightInvY2})
	if err != nil || r.Curve.Outcome != "converged" {
		t.Fatal(err)
	}
	c := curveOf(FourPL)
	var lev float64
	for i, p := range r.Points {
		want := c.Eval(p.X, r.Coefficients, nil)
		if !closeTo(p.Fitted, want, 0, 1e-12*math.Abs(p.Y)) {
			t.Errorf("point %d (excluded %v): fitted %v, curve %v", i, p.Excluded, p.Fitted, want)
		}
		if back := c.Eval(p.BackCalculated, r.Coefficients, nil); !p.HasBackCalc || !closeTo(back, p.Y, 1e-9, 0) {
			t.Errorf("point %d: back-calculated %v maps to %v, response %v", i, p.BackCalculated, back, p.Y)
		}
		if p.Excluded != (p.Weight == 0) {
			t.Errorf("point %d: excluded %v, weight %v", i, p.Excluded, p.Weight)
		}
		if !p.Excluded {
			lev += p.Leverage
		}
	}
	if !closeTo(lev, 4, 1e-9, 0) {
		t.Errorf("leverages sum to %v, want 4", lev)
	}
}
