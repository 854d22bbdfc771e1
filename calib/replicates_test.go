package calib

import (
	"math"
	"testing"
)

// TestSolveNLLSReplicatesReduced: readings that share a concentration are
// fitted as one row per level (weight Σw at the weighted mean response)
// plus their pure-error sum of squares, which is the same least-squares
// problem (the sum of squares splits into lack of fit and pure error; the
// split is common textbook algebra, stated here from memory). The grouped
// solve must reach the readings' own solve. Rounding differs between the
// two paths, and each stops on its own criteria near the same minimum, so
// the tolerances are those of the permutation test: coefficients within
// 1e-8 relative + 1e-5 of their SE, SEs and s to 1e-6, covariance to 1e-5,
// residuals within 1e-5·s, and the same DF. Cases: the invented
// immunoassay (duplicates in order) with 1/y² weights, and a saturating
// exponential with unit weights and triplicates in shuffled order.
func TestSolveNLLSReplicatesReduced(t *testing.T) {
	x4, y4, w4 := elisaCurve()
	xe := []float64{4, 1, 2, 8, 1, 4, 16, 2, 8, 1, 16, 4, 2, 8, 16}
	ye := make([]float64, len(xe))
	for i, v := range xe {
		// y = 3·(1 − e^(−0.2x)) with fixed invented deviations.
		ye[i] = 3*(1-math.Exp(-0.2*v)) + 0.02*math.Sin(float64(7*i+1))
	}
	cases := []struct {
		name   string
		c      Curve
		x, y   []float64
		w      []float64
		start  []float64
		levels int
	}{
		{"4PL duplicates, 1/y²", logistic{}, x4, y4, w4, []float64{0.05, 1.1, 20, 3}, 8},
		{"exponential triplicates, shuffled", expCurve{}, xe, ye, nil, []float64{2, 0.1}, 5},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			rep := groupReplicates(tc.x, nil, tc.y, tc.w, nil)
			if len(rep.x) != tc.levels {
				t.Fatalf("%d levels, want %d", len(rep.x), tc.levels)
			}
			opt := NLLSOptions{Start: tc.start}
			grouped, err := solveNLLS(tc.c, tc.x, nil, tc.y, tc.w, opt, nil)
			if err != nil {
				t.Fatal(err)
			}
			// An empty grouping fits the readings as they are.
			plain, err := solveNLLS(tc.c, tc.x, nil, tc.y, tc.w, opt, &replicates{})
			if err != nil {
				t.Fatal(err)
			}
			if grouped.Outcome != Converged || plain.Outcome != Converged {
				t.Fatalf("outcomes %s, %s", grouped.Outcome, plain.Outcome)
			}
			for j := range plain.Params {
				if !closeTo(grouped.Params[j], plain.Params[j], 1e-8, 1e-5*plain.StdErrors[j]) || !closeTo(grouped.StdErrors[j], plain.StdErrors[j], 1e-6, 0) {
					t.Errorf("coefficient %d: grouped %v ± %v, readings %v ± %v", j, grouped.Params[j], grouped.StdErrors[j], plain.Params[j], plain.StdErrors[j])
				}
				for k := range plain.Params {
					if !closeTo(grouped.Covariance[j][k], plain.Covariance[j][k], 1e-5, 1e-8*math.Sqrt(plain.Covariance[j][j]*plain.Covariance[k][k])) {
						t.Errorf("covariance %d,%d: grouped %v, readings %v", j, k, grouped.Covariance[j][k], plain.Covariance[j][k])
					}
				}
			}
			if !closeTo(grouped.SSR, plain.SSR, 1e-9, 0) || !closeTo(grouped.ResidualSD, plain.ResidualSD, 1e-6, 0) || grouped.DF != plain.DF {
				t.Errorf("SSR %v s %v df %d, readings %v %v %d", grouped.SSR, grouped.ResidualSD, grouped.DF, plain.SSR, plain.ResidualSD, plain.DF)
			}
			for i := range plain.Residuals {
				if !closeTo(grouped.Residuals[i], plain.Residuals[i], 0, 1e-5*plain.ResidualSD) {
					t.Errorf("residual %d: grouped %v, readings %v", i, grouped.Residuals[i], plain.Residuals[i])
				}
			}
		})
	}
}

// TestLogisticStartRefined: on the invented immunoassay, whose top
// calibrator lies far below the upper asymptote, the logit line's start is
// far from the fit (c off by half); the variable-projection refinement
// brings every coefficient within 1e-6 of the converged fit and lowers the
// sum of squares, so that the solver confirms it in at most two
// iterations.
func TestLogisticStartRefined(t *testing.T) {
	x, y, w := elisaCurve()
	f := fitCurveOrFatal(t, x, y, w, CurveOptions{Model: FourPL})
	lx := make([]float64, len(x))
	for i, v := range x {
		lx[i] = math.Log(v)
	}
	rough := startLogistic(x, lx, y, levelEnds(x, y), func(int) (float64, bool) { return 0, false }, make([]float64, 3*len(x)))
	refineAsymptotes(x, lx, y, w, rough, func(int) (float64, bool) { return 0, false }, make([]float64, 2*len(x)))
	ss := func(beta []float64) float64 {
		var s float64
		for i := range x {
			r := y[i] - logistic{}.Eval(x[i], beta, nil)
			s += w[i] * r * r
		}
		return s
	}
	if closeTo(rough[2], f.Coefficients[2], 0.1, 0) {
		t.Fatalf("the logit start %v is already close to the fit %v: the case no longer tests the refinement", rough, f.Coefficients)
	}
	for j := range f.Start {
		if !closeTo(f.Start[j], f.Coefficients[j], 1e-6, 0) {
			t.Errorf("start coefficient %d: %v, fit %v (logit start %v)", j, f.Start[j], f.Coefficients[j], rough[j])
		}
	}
	if !(ss(f.Start) < ss(rough)) {
		t.Errorf("SS at the refined start %v, at the logit start %v", ss(f.Start), ss(rough))
	}
	if f.Iterations > 2 {
		t.Errorf("%d iterations from the refined start", f.Iterations)
	}
	t.Logf("logit start %v (SS %.6g), refined %v (SS %.6g), fit %v after %d iterations", rough, ss(rough), f.Start, ss(f.Start), f.Coefficients, f.Iterations)
}

// TestLogisticCurvature: the 4PL's second derivatives in b and ln c that
// the start's Newton steps use agree with central second differences of
// the curve itself (step 1e-4 in each, error O(1e-8) relative; required
// 1e-6 of the largest), at concentrations below, at and above c.
func TestLogisticCurvature(t *testing.T) {
	a, b, c, d := 0.05, 1.18, 24.6, 2.97
	f := func(x, b, lc float64) float64 {
		return logistic{}.Eval(x, []float64{a, b, math.Exp(lc), d}, nil)
	}
	const e = 1e-4
	for _, x := range []float64{0.5, 5, 24.6, 100} {
		lc := math.Log(c)
		u := math.Log(x / c)
		h := 1 / (1 + math.Pow(x/c, b))
		fbb, fbl, fll := logisticCurvature((a-d)*h*(1-h), h, u, b)
		nbb := (f(x, b+e, lc) - 2*f(x, b, lc) + f(x, b-e, lc)) / (e * e)
		nll := (f(x, b, lc+e) - 2*f(x, b, lc) + f(x, b, lc-e)) / (e * e)
		nbl := (f(x, b+e, lc+e) - f(x, b+e, lc-e) - f(x, b-e, lc+e) + f(x, b-e, lc-e)) / (4 * e * e)
		big := max(math.Abs(nbb), math.Abs(nbl), math.Abs(nll))
		for _, p := range [][2]float64{{fbb, nbb}, {fbl, nbl}, {fll, nll}} {
			if !closeTo(p[0], p[1], 0, 1e-6*big) {
				t.Errorf("x = %v: curvature %v, second differences %v", x, [3]float64{fbb, fbl, fll}, [3]float64{nbb, nbl, nll})
				break
			}
		}
	}
}
