package calib

import (
	"math"
	"testing"

	"gonum.org/v1/gonum/stat/distuv"
)

// quantileSE is the standard error of the sample p-quantile of M draws
// from a distribution with density f at that quantile, √(p(1−p)/M)/f
// (the asymptotic variance of a sample quantile; JCGM 101 §7.9 rests on
// the same spread).
func quantileSE(p float64, m int, f float64) float64 {
	return math.Sqrt(p*(1-p)/float64(m)) / f
}

// calibrationBudget fits an invented straight line through exactLine and
// returns the one-term budget of an unknown read once at x0 (b0 = 0.1, b1 = 1).
func calibrationBudget(t *testing.T, xs []float64, reps int, s, x0 float64) (BudgetInput, Prediction) {
	t.Helper()
	rep := fitOrFatal(t, exactLine(xs, reps, 0.1, 1, s), Options{Model: Linear})
	term, pr, err := rep.CalibrationTerm("x0", []float64{0.1 + x0}, 1)
	if err != nil {
		t.Fatal(err)
	}
	return BudgetInput{Terms: []UncertaintyTerm{term}}, pr
}

func runBoth(t *testing.T, in BudgetInput, opt MCOptions) (Budget, MCResult) {
	t.Helper()
	b, err := ComputeBudget(in)
	if err != nil {
		t.Fatal(err)
	}
	mc, err := MonteCarlo(in, opt)
	if err != nil {
		t.Fatal(err)
	}
	return b, mc
}

// A well-determined line (8 levels × 3, s(y/x) = 2 % of the slope per unit;
// invented data): the ratio x̂0 is nearly linear in its inputs, so the GUM
// interval x̂0 ± t(0.975; 22)·u and the Monte Carlo interval agree within
// the simulation error of the MC endpoints and within δ of JCGM 101 §8.2
// with two significant digits.
func TestMonteCarloAgreesOnWellDeterminedLine(t *testing.T) {
	in, _ := calibrationBudget(t, []float64{1, 2, 3, 4, 5, 6, 7, 8}, 3, 0.02, 6)
	b, mc := runBoth(t, in, MCOptions{Seed: 7})
	if mc.Draws != 200_000 || mc.Discarded != 0 {
		t.Errorf("draws %d (discarded %d), want the default 200 000 = 10⁴/(1 − 0.95)", mc.Draws, mc.Discarded)
	}
	// The MC output of a multivariate t with ν = 22 is close to u·t_22; its
	// density at the 2.5 % and 97.5 % points sets the simulation error.
	f := distuv.StudentsT{Mu: 0, Sigma: 1, Nu: 22}.Prob(b.CoverageFactor) / b.Combined
	se := quantileSE(0.025, mc.Draws, f)
	if d := math.Abs(mc.Low - (b.Value - b.ExpandedExact)); d > 4*se {
		t.Errorf("MC low %v vs GUM %v: differ by %.3g > 4 simulation SE (%.3g)", mc.Low, b.Value-b.ExpandedExact, d, 4*se)
	}
	if d := math.Abs(mc.High - (b.Value + b.ExpandedExact)); d > 4*se {
		t.Errorf("MC high %v vs GUM %v: differ by %.3g > 4 simulation SE (%.3g)", mc.High, b.Value+b.ExpandedExact, d, 4*se)
	}
	chk, err := CompareGUMMC(b, mc, 2)
	if err != nil {
		t.Fatal(err)
	}
	if !chk.Agree {
		t.Errorf("JCGM 101 §8.2 check fails on a well-determined line: %+v", chk)
	}
	// With DF = 0 the inputs are plain normals and the nearly linear ratio
	// is nearly normal: its interval is x̂0 ± 1.96·u (z(0.975) = 1.95996),
	// narrower than the GUM's t(0.975; 22) = 2.074 interval.
	normal := in
	cd := *in.Terms[0].Curve
	cd.DF = 0
	normal.Terms = []UncertaintyTerm{in.Terms[0]}
	normal.Terms[0].Curve = &cd
	mcn, err := MonteCarlo(normal, MCOptions{Seed: 7})
	if err != nil {
		t.Fatal(err)
	}
	fz := distuv.UnitNormal.Prob(1.95996) / b.Combined
	sez := quantileSE(0.025, mcn.Draws, fz)
	if d := math.Abs(mcn.High - (b.Value + 1.95996*b.Combined)); d > 4*sez {
		t.Errorf("normal inputs: MC high %v, want x̂0 + 1.96·u = %v ± %.3g", mcn.High, b.Value+1.95996*b.Combined, 4*sez)
	}
}

// A weakly determined slope (5 levels × 2, s(y/x) = 0.9, slope 1; invented
// data; g = t²s²/(b1²Sxx) ≈ 0.22): x̂0 = (ȳ0 − b0)/b1 is skewed, the Monte
// Carlo interval is asymmetric about x̂0 and fails the JCGM 101 §8.2 check
// against the symmetric GUM interval. Fieller's exact interval (Fieller
// 1954, JRSS B 16:175; the engine's Predict) is the outside reference the
// MC interval is held to, within 0.1 (2 % of its width).
func TestMonteCarloDiffersOnWeakSlope(t *testing.T) {
	in, pr := calibrationBudget(t, []float64{1, 2, 3, 4, 5}, 2, 0.9, 5)
	b, mc := runBoth(t, in, MCOptions{Seed: 7})
	up, down := mc.High-b.Value, b.Value-mc.Low
	if up/down < 1.3 { // Fieller: (8.276 − 5)/(5 − 2.822) = 1.50
		t.Errorf("MC interval [%v, %v] about x̂0 = %v: upper/lower half = %.3f, want a clearly asymmetric interval (> 1.3)", mc.Low, mc.High, b.Value, up/down)
	}
	chk, err := CompareGUMMC(b, mc, 2)
	if err != nil {
		t.Fatal(err)
	}
	if chk.Agree {
		t.Errorf("JCGM 101 §8.2 check passes on a weak slope: %+v", chk)
	}
	if !pr.Interval.Bounded {
		t.Fatal("Fieller interval unbounded: the fixture is too weak")
	}
	if math.Abs(mc.Low-pr.Interval.Low) > 0.1 || math.Abs(mc.High-pr.Interval.High) > 0.1 {
		t.Errorf("MC [%v, %v] vs Fieller [%v, %v]: differ by more than 0.1", mc.Low, mc.High, pr.Interval.Low, pr.Interval.High)
	}
	if mc.ShortHigh-mc.ShortLow > mc.High-mc.Low {
		t.Errorf("shortest interval [%v, %v] longer than the symmetric one", mc.ShortLow, mc.ShortHigh)
	}
	// The same seed repeats the result; another seed moves it a little.
	_, again := runBoth(t, in, MCOptions{Seed: 7})
	_, other := runBoth(t, in, MCOptions{Seed: 8})
	if again.Low != mc.Low || again.High != mc.High {
		t.Error("the same seed gave another result")
	}
	if other.Low == mc.Low && other.High == mc.High {
		t.Error("another seed gave the same interval")
	}
}

// Analytic references for the input distributions (M = 200 000):
//   - rectangular on 0 ± 1: the symmetric 95 % interval is ±0.95 exactly,
//     while the GUM gives ±1.96/√3 = ±1.1316 (JCGM 101 §6.4.2 distribution);
//   - y = 1/x with x rectangular on 1 ± 0.5: y has density 1/(2a·y²),
//     decreasing, so the shortest interval is [1/1.5, 1/(1.5 − 0.95)] =
//     [0.6667, 1.8182] and the symmetric one [1/1.475, 1/0.525] =
//     [0.6780, 1.9048];
//   - two rectangular terms on 1 ± 1 in one correlation group, summed: one
//     variate, so y = 2 + 2U on ±2 and the interval is 2 ± 1.9;
//   - a Type A term with ν = 4: x ± u·t(0.975; 4) = ±2.7764·u (Student t
//     table), which the GUM reproduces (ν_eff = 4).
func TestMonteCarloAnalyticReferences(t *testing.T) {
	rect := RectangularTerm("r", SourceOther, 0, 1)
	b, mc := runBoth(t, BudgetInput{Model: ModelSum, Terms: []UncertaintyTerm{rect}}, MCOptions{Seed: 1})
	tol := 4 * quantileSE(0.025, mc.Draws, 0.5)
	if math.Abs(mc.Low+0.95) > tol || math.Abs(mc.High-0.95) > tol {
		t.Errorf("rectangular: MC [%v, %v], want ±0.95 ± %.2g", mc.Low, mc.High, tol)
	}
	if chk, _ := CompareGUMMC(b, mc, 2); chk.Agree {
		t.Errorf("rectangular: GUM ±%v passed the JCGM 101 check against ±0.95", b.ExpandedExact)
	}

	inv := RectangularTerm("x", SourceOther, 1, 0.5)
	inv.Exponent = -1
	_, mc = runBoth(t, BudgetInput{Terms: []UncertaintyTerm{inv}}, MCOptions{Seed: 2})
	for _, c := range []struct {
		what      string
		got, want float64
	}{
		{"shortest low", mc.ShortLow, 1 / 1.5}, {"shortest high", mc.ShortHigh, 1 / 0.55},
		{"symmetric low", mc.Low, 1 / 1.475}, {"symmetric high", mc.High, 1 / 0.525},
	} {
		if math.Abs(c.got-c.want) > 0.01 {
			t.Errorf("1/x: %s = %v, want %v ± 0.01 (analytic)", c.what, c.got, c.want)
		}
	}

	g1, g2 := RectangularTerm("a", SourceStandard, 1, 1), RectangularTerm("b", SourceStandard, 1, 1)
	g1.Group, g2.Group = "stock", "stock"
	_, mc = runBoth(t, BudgetInput{Model: ModelSum, Terms: []UncertaintyTerm{g1, g2}}, MCOptions{Seed: 3})
	tol = 4 * quantileSE(0.025, mc.Draws, 0.25)
	if math.Abs(mc.Low-0.1) > tol || math.Abs(mc.High-3.9) > tol {
		t.Errorf("correlated pair: MC [%v, %v], want [0.1, 3.9] ± %.2g", mc.Low, mc.High, tol)
	}

	ta := UncertaintyTerm{Name: "reads", Kind: DistTypeA, Value: 10, StdUncertainty: 0.5, DF: 4}
	b, mc = runBoth(t, BudgetInput{Model: ModelSum, Terms: []UncertaintyTerm{ta}}, MCOptions{Seed: 4})
	f := distuv.StudentsT{Mu: 0, Sigma: 1, Nu: 4}.Prob(2.7764) / 0.5
	tol = 4 * quantileSE(0.025, mc.Draws, f)
	if math.Abs(mc.High-(10+2.7764*0.5)) > tol || math.Abs(mc.Low-(10-2.7764*0.5)) > tol {
		t.Errorf("type A ν = 4: MC [%v, %v], want 10 ± 1.3882 ± %.2g", mc.Low, mc.High, tol)
	}
	if math.Abs(b.CoverageFactor-2.7764) > 1e-4 {
		t.Errorf("GUM k for ν = 4: %v, want 2.7764 (Student t table)", b.CoverageFactor)
	}
}

func TestMonteCarloRejectsBadInput(t *testing.T) {
	ok := BudgetInput{Terms: []UncertaintyTerm{{Value: 1, StdUncertainty: 0.1}}}
	if _, err := MonteCarlo(ok, MCOptions{Draws: MaxMCDraws + 1}); err == nil {
		t.Error("too many draws accepted")
	}
	bad := BudgetInput{Terms: []UncertaintyTerm{{Value: 1, StdUncertainty: 0.1,
		Curve: &CurveDraw{B1: 1, Cov: [2][2]float64{{1, 2}, {2, 1}}}}}}
	if _, err := MonteCarlo(bad, MCOptions{Draws: 10}); err == nil {
		t.Error("an indefinite covariance was accepted")
	}
	b, _ := ComputeBudget(ok)
	mc, _ := MonteCarlo(BudgetInput{Level: 0.99, Terms: ok.Terms}, MCOptions{Draws: 1000})
	if _, err := CompareGUMMC(b, mc, 2); err == nil {
		t.Error("comparison across levels accepted")
	}
}
