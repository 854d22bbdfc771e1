package calib

import (
	"math"
	"strconv"
	"testing"
)

// exactLine returns readings at each level, reps per level, whose unweighted
// fit is exactly y = b0 + b1·x with residual SD s: the residuals at a level
// are (d, −d) for two replicates or (d, −d, 0) for three, so they sum to
// zero at every level (hence Σe = Σx·e = 0) and Σe² = levels·2d² =
// s²·(n − 2).
func exactLine(xs []float64, reps int, b0, b1, s float64) []Point {
	n := len(xs) * reps
	d := s * math.Sqrt(float64(n-2)/float64(2*len(xs)))
	e := []float64{d, -d, 0}
	var pts []Point
	for i, x := range xs {
		for r := 0; r < reps; r++ {
			pts = append(pts, Point{Level: "L" + strconv.Itoa(i+1), X: x, Y: b0 + b1*x + e[r]})
		}
	}
	return pts
}

// Eurachem/CITAC QUAM (3rd ed.) Example A5, cadmium released from ceramic
// ware: the calibration data are recalled from memory (FIELD-NOTES §10,
// tagged [M]): standards 0.1, 0.3, 0.5, 0.7, 0.9 mg/L read 3 times (n = 15),
// b1 = 0.2410, b0 = 0.0087, s = 0.005486, the sample read twice (p = 2).
// The published figures (FIELD-NOTES §10, [S]): c0 = 0.26 mg/L with
// u(c0) = 0.018 mg/L, relative 0.069.
//
// Hand computation [C]: x̄ = 0.5, Sxx = 3·(0.16 + 0.04 + 0 + 0.04 + 0.16) = 1.2,
// u(c0) = (0.005486/0.2410)·√(1/2 + 1/15 + (0.26 − 0.5)²/1.2)
//
//	= 0.0227635·√0.6146667 = 0.0178466 mg/L.
//
// The other terms of A5 (V_L, a_V, f_acid, f_time, f_temp) are not in
// FIELD-NOTES, so the published combined relative uncertainty of r (0.09)
// is not checked here.
func TestQUAMExampleA5CalibrationTerm(t *testing.T) {
	pts := exactLine([]float64{0.1, 0.3, 0.5, 0.7, 0.9}, 3, 0.0087, 0.2410, 0.005486)
	rep := fitOrFatal(t, pts, Options{Model: Linear, Weighting: WeightNone})
	for _, c := range []struct {
		what      string
		got, want float64
	}{
		{"b0 (QUAM A5, recalled [M])", rep.Coefficients[0], 0.0087},
		{"b1 (QUAM A5, recalled [M])", rep.Coefficients[1], 0.2410},
		{"s (QUAM A5, recalled [M])", rep.ResidualSD, 0.005486},
	} {
		if !closeTo(c.got, c.want, 1e-12, 1e-15) {
			t.Fatalf("constructed readings: %s = %.10g, want %v", c.what, c.got, c.want)
		}
	}
	y0 := 0.0087 + 0.2410*0.26 // the mean response of c0 = 0.26 mg/L
	term, pr, err := rep.CalibrationTerm("c0", []float64{y0 - 0.001, y0 + 0.001}, 1)
	if err != nil {
		t.Fatal(err)
	}
	if !closeTo(term.Value, 0.26, 1e-12, 0) {
		t.Errorf("c0 = %.10g, want 0.26 (QUAM A5 [S])", term.Value)
	}
	if !closeTo(term.StdUncertainty, 0.0178466, 1e-5, 0) {
		t.Errorf("u(c0) = %.7g, want 0.0178466 (hand computation above [C])", term.StdUncertainty)
	}
	if got, _ := roundSig2(term.StdUncertainty, false); math.Abs(got-0.018) > 1e-15 {
		t.Errorf("u(c0) to two figures = %v, want 0.018 mg/L (QUAM A5 [S])", got)
	}
	if rel := term.StdUncertainty / term.Value; math.Abs(rel-0.069) > 0.0005 {
		t.Errorf("u(c0)/c0 = %.5f, want 0.069 (QUAM A5 [S])", rel)
	}
	if term.DF != 13 || term.Source != SourceCalibration || pr.Readings != 2 {
		t.Errorf("term ν = %v, source %q, readings %d; want 13, calibration, 2", term.DF, term.Source, pr.Readings)
	}
	// The calibration term alone in a product model keeps its relative u.
	b, err := ComputeBudget(BudgetInput{Model: ModelProduct, Terms: []UncertaintyTerm{term}})
	if err != nil {
		t.Fatal(err)
	}
	if !closeTo(b.RelativeCombined, term.StdUncertainty/0.26, 1e-12, 0) || b.EffectiveDF != 13 {
		t.Errorf("one-term budget: u_c,rel = %v, ν_eff = %v", b.RelativeCombined, b.EffectiveDF)
	}
}

// A three-term sum model, y = x1 + 2·x2 − 0.5·x3, against a hand
// computation (JCGM 100 eq. 10 and G.2b):
//
//	x = (10, 5, 2), u = (0.3, 0.1, 0.4), ν = (4, ∞, 9)
//	y = 10 + 10 − 1 = 19
//	c·u = (0.3, 0.2, −0.2); u_c² = 0.09 + 0.04 + 0.04 = 0.17; u_c = 0.4123106
//	ν_eff = 0.17²/(0.3⁴/4 + 0 + 0.2⁴/9) = 0.0289/0.0022027778 = 13.119798
//	k = t(0.975; 13) = 2.160 (Student t table, e.g. NIST/SEMATECH
//	e-Handbook §1.3.6.7.2; ν_eff truncated, JCGM 100 §G.4.2)
//	U = 2.1604·0.4123106 = 0.8908 → 0.89; y → 19.00
//	shares = 0.09/0.17, 0.04/0.17, 0.04/0.17 = 0.5294, 0.2353, 0.2353
func TestBudgetThreeTermsByHand(t *testing.T) {
	in := BudgetInput{Model: ModelSum, Terms: []UncertaintyTerm{
		{Name: "x1", Value: 10, StdUncertainty: 0.3, Sensitivity: 1, DF: 4, Kind: DistTypeA},
		{Name: "x2", Value: 5, StdUncertainty: 0.1, Sensitivity: 2},
		{Name: "x3", Value: 2, StdUncertainty: 0.4, Sensitivity: -0.5, DF: 9, Kind: DistTypeA},
	}}
	b, err := ComputeBudget(in)
	if err != nil {
		t.Fatal(err)
	}
	near := func(what string, got, want, tol float64) {
		t.Helper()
		if math.Abs(got-want) > tol {
			t.Errorf("%s = %.8g, want %v ± %v (hand computation in the comment)", what, got, want, tol)
		}
	}
	near("y", b.Value, 19, 1e-12)
	near("u_c", b.Combined, 0.41231056, 1e-8)
	near("ν_eff", b.EffectiveDF, 13.119798, 1e-6)
	near("k", b.CoverageFactor, 2.160, 5e-4)
	near("U", b.Expanded, 0.89, 1e-12)
	near("share x1", b.Terms[0].Share, 0.09/0.17, 1e-12)
	near("share x2", b.Terms[1].Share, 0.04/0.17, 1e-12)
	near("share x3", b.Terms[2].Share, 0.04/0.17, 1e-12)
	if b.ExpandedText != "0.89" || b.ValueText != "19.00" || b.Decimals != 2 {
		t.Errorf("texts %q ± %q (%d decimals), want 19.00 ± 0.89", b.ValueText, b.ExpandedText, b.Decimals)
	}
	in.Coverage = CoverageK2
	b2, err := ComputeBudget(in)
	if err != nil {
		t.Fatal(err)
	}
	near("U with k = 2", b2.Expanded, 0.82, 1e-12) // 2·0.4123 = 0.8246 → 0.82
}

// A quotient model y = a·b/c: relative uncertainties add in quadrature
// (JCGM 100 §5.1.6; QUAM §8.2.6). Hand computation: rel = (1 %, 2 %, 2 %),
// y = 2·3/4 = 1.5, u_c/y = √(1 + 4 + 4) % = 3 %, u_c = 0.045,
// U = 2·0.045 = 0.090, y → 1.500.
func TestBudgetQuotientByHand(t *testing.T) {
	c := NormalTerm("c", SourceStandard, 4, 0.16, 2) // U = 0.16 at k = 2: u = 0.08
	c.Exponent = -1
	b, err := ComputeBudget(BudgetInput{Coverage: CoverageK2, Terms: []UncertaintyTerm{
		{Name: "a", Value: 2, StdUncertainty: 0.02},
		{Name: "b", Value: 3, StdUncertainty: 0.06},
		c,
	}})
	if err != nil {
		t.Fatal(err)
	}
	if b.Model != ModelProduct || !closeTo(b.Value, 1.5, 1e-15, 0) || !closeTo(b.RelativeCombined, 0.03, 1e-12, 0) ||
		!closeTo(b.Combined, 0.045, 1e-12, 0) || b.ExpandedText != "0.090" || b.ValueText != "1.500" {
		t.Errorf("got y = %v, u_c = %v (rel %v), U %q, y %q; want 1.5, 0.045 (0.03), 0.090, 1.500 (hand computation)",
			b.Value, b.Combined, b.RelativeCombined, b.ExpandedText, b.ValueText)
	}
	if !closeTo(b.Terms[2].Coefficient, -1.5/4, 1e-15, 0) {
		t.Errorf("c_c = %v, want −y/c = −0.375", b.Terms[2].Coefficient)
	}
}

// Two terms in one correlation group add linearly (r = +1, JCGM 100
// §5.2.2 note 1). Hand computation: contributions 0.1, 0.1 (group "stock")
// and 0.1 alone: u_c² = (0.1 + 0.1)² + 0.1² = 0.05 (independent: 0.03);
// shares 0.1·0.2/0.05 = 0.4, 0.4, 0.01/0.05 = 0.2.
func TestBudgetCorrelatedGroup(t *testing.T) {
	stock := func(name string) UncertaintyTerm {
		return UncertaintyTerm{Name: name, Source: SourceStandard, Value: 1, StdUncertainty: 0.1, Group: "stock"}
	}
	in := BudgetInput{Model: ModelSum, Terms: []UncertaintyTerm{stock("s1"), stock("s2"),
		{Name: "other", Value: 1, StdUncertainty: 0.1, DF: 10}}}
	b, err := ComputeBudget(in)
	if err != nil {
		t.Fatal(err)
	}
	if !closeTo(b.Combined, math.Sqrt(0.05), 1e-12, 0) {
		t.Errorf("u_c = %v, want √0.05 = 0.2236 (hand computation)", b.Combined)
	}
	for i, want := range []float64{0.4, 0.4, 0.2} {
		if !closeTo(b.Terms[i].Share, want, 1e-12, 0) {
			t.Errorf("share %d = %v, want %v", i, b.Terms[i].Share, want)
		}
	}
	// ν_eff = 0.05²/(0.1⁴/10) = 250 (the group has ν = ∞).
	if !closeTo(b.EffectiveDF, 250, 1e-12, 0) {
		t.Errorf("ν_eff = %v, want 250 (hand computation)", b.EffectiveDF)
	}
	bad := in
	bad.Terms = append([]UncertaintyTerm(nil), in.Terms...)
	bad.Terms[1].Kind = DistRectangular
	if _, err := ComputeBudget(bad); err == nil {
		t.Error("a group mixing distributions was accepted")
	}
}

func TestRoundSig2(t *testing.T) {
	for _, c := range []struct {
		u     float64
		up    bool
		want  float64
		place int
	}{
		{0.8908, false, 0.89, -2},
		{0.0995, false, 0.10, -2}, // carries into a third figure
		{0.0178466, false, 0.018, -3},
		{123.4, false, 120, 1},
		{12.5, false, 13, 0},
		{0.12, true, 0.12, -2}, // 0.12 is 0.11999…: not up to 0.13
		{0.1201, true, 0.13, -2},
		{9.96, false, 10, 0},
	} {
		got, place := roundSig2(c.u, c.up)
		if math.Abs(got-c.want) > 1e-12*c.want || place != c.place {
			t.Errorf("roundSig2(%v, up=%v) = %v (place %d), want %v (place %d)", c.u, c.up, got, place, c.want, c.place)
		}
	}
	// y rounded to the place of U when U ≥ 100 (JCGM 100 §7.2.6).
	b, err := ComputeBudget(BudgetInput{Model: ModelSum, Coverage: CoverageK2,
		Terms: []UncertaintyTerm{{Value: 12345.6, StdUncertainty: 61.7}}})
	if err != nil {
		t.Fatal(err)
	}
	if b.Expanded != 120 || b.ValueRounded != 12350 || b.ValueText != "12350" {
		t.Errorf("U = %v, y = %v (%q); want 120, 12350", b.Expanded, b.ValueRounded, b.ValueText)
	}
}

func TestBudgetRejectsBadInput(t *testing.T) {
	for name, in := range map[string]BudgetInput{
		"no terms":       {},
		"negative u":     {Terms: []UncertaintyTerm{{Value: 1, StdUncertainty: -1}}},
		"NaN value":      {Terms: []UncertaintyTerm{{Value: math.NaN(), StdUncertainty: 1}}},
		"zero factor":    {Model: ModelProduct, Terms: []UncertaintyTerm{{Value: 0, StdUncertainty: 1}}},
		"df below one":   {Terms: []UncertaintyTerm{{Value: 1, StdUncertainty: 1, DF: 0.5}}},
		"unknown model":  {Model: "log", Terms: []UncertaintyTerm{{Value: 1, StdUncertainty: 1}}},
		"level too high": {Level: 1, Terms: []UncertaintyTerm{{Value: 1, StdUncertainty: 1}}},
	} {
		if _, err := ComputeBudget(in); err == nil {
			t.Errorf("%s: accepted", name)
		} else if _, ok := err.(*InputError); !ok {
			t.Errorf("%s: error %T, want *InputError", name, err)
		}
	}
}

func TestTermConstructors(t *testing.T) {
	// QUAM App. E.1 / JCGM 100 §4.3.7: a ±a tolerance gives a/√3.
	r := RectangularTerm("flask", SourcePreparation, 100, 0.1)
	if !closeTo(r.StdUncertainty, 0.1/math.Sqrt(3), 1e-15, 0) {
		t.Errorf("rectangular u = %v", r.StdUncertainty)
	}
	// Type A of 1, 2, 3, 4: mean 2.5, s = √(5/3), u = s/2, ν = 3.
	a, err := TypeATerm("reads", SourceRepeatability, []float64{1, 2, 3, 4})
	if err != nil || a.Value != 2.5 || !closeTo(a.StdUncertainty, math.Sqrt(5.0/3)/2, 1e-15, 0) || a.DF != 3 {
		t.Errorf("type A term %+v, %v", a, err)
	}
	f, err := RepeatabilityFactor("prep", []float64{1, 2, 3, 4})
	if err != nil || f.Value != 1 || !closeTo(f.StdUncertainty, math.Sqrt(5.0/3)/2/2.5, 1e-15, 0) {
		t.Errorf("repeatability factor %+v, %v", f, err)
	}
	// Dilution 10 mL to 100 mL, then 5 mL to 50 mL: factor 100 from the terms.
	ts := DilutionTerms("dil", []VolumeStep{{Aliquot: 10, AliquotTol: 0.02, Final: 100, FinalTol: 0.1},
		{Aliquot: 5, AliquotTol: 0.015, Final: 50, FinalTol: 0.06}})
	b, err := ComputeBudget(BudgetInput{Terms: ts})
	if err != nil {
		t.Fatal(err)
	}
	wantRel := math.Sqrt(sq(0.02/10)+sq(0.1/100)+sq(0.015/5)+sq(0.06/50)) / math.Sqrt(3)
	if !closeTo(b.Value, 100, 1e-14, 0) || !closeTo(b.RelativeCombined, wantRel, 1e-12, 0) {
		t.Errorf("dilution factor %v ± rel %v, want 100 ± %v", b.Value, b.RelativeCombined, wantRel)
	}
	rc := RecoveryTerm("rec", 0.95, 0.02, 10, true)
	ru := RecoveryTerm("rec", 0.95, 0.02, 10, false)
	if rc.Exponent != -1 || rc.Value != 0.95 || ru.Value != 1 || !closeTo(ru.StdUncertainty, 0.02/0.95, 1e-15, 0) {
		t.Errorf("recovery terms %+v %+v", rc, ru)
	}
}

func sq(v float64) float64 { return v * v }

// A budget without uncertainty does not round its value to an integer.
func TestBudgetZeroUncertainty(t *testing.T) {
	b, err := ComputeBudget(BudgetInput{Model: ModelSum, Terms: []UncertaintyTerm{{Value: 0.2634, StdUncertainty: 0}}})
	if err != nil {
		t.Fatal(err)
	}
	if b.ValueRounded != 0.2634 || b.ValueText != "0.2634" || b.Expanded != 0 || !math.IsInf(b.EffectiveDF, 1) {
		t.Errorf("y %v (%q), U %v, ν_eff %v; want 0.2634 kept, U 0, ν_eff ∞", b.ValueRounded, b.ValueText, b.Expanded, b.EffectiveDF)
	}
}

// Standards from one stock: certificate 1000 ± 2 mg/L (k = 2) diluted
// 1 mL → 100 mL (tolerances ±0.008 and ±0.1 mL). Hand computation: relative
// u = √((1/1000)² + (0.008/(√3·1))² + (0.1/(√3·100))²)
// = √(1e-6 + 2.1333e-5 + 3.333e-7) = √2.2667e-5 = 0.0047610; the value stays 1.
func TestStandardTerms(t *testing.T) {
	ts := StandardTerms("Cd stock", 1000, 2, 2, []VolumeStep{{Aliquot: 1, AliquotTol: 0.008, Final: 100, FinalTol: 0.1}})
	b, err := ComputeBudget(BudgetInput{Terms: ts})
	if err != nil {
		t.Fatal(err)
	}
	if b.Value != 1 || !closeTo(b.RelativeCombined, 0.0047610, 1e-4, 0) || ts[0].Group != "stock:Cd stock" {
		t.Errorf("value %v, relative u %v, group %q; want 1, 0.0047610 (hand computation)", b.Value, b.RelativeCombined, ts[0].Group)
	}
}
