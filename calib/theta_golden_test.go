package calib

import (
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"testing"
)

// TestThetaGolden: the power_of_mean weighting's θ, its number of rounds
// and the final weighted 4PL against testdata/golden/scipy_theta_4pl.json
// (testdata/gen/make_golden_theta.py: an independent implementation of the
// same procedure with scipy's curve_fit, MINPACK lm, and numpy's polyfit on
// invented triplicate wells). Tolerances: coefficients 1e-6 relative and
// covariance 1e-4 relative, as in TestScipyCurvesGolden (both solvers stop
// near, not at, the minimum); θ 1e-6 absolute, since θ moves with the
// fitted level means only at that scale.
func TestThetaGolden(t *testing.T) {
	raw, err := os.ReadFile(filepath.Join("..", "testdata", "golden", "scipy_theta_4pl.json"))
	if err != nil {
		t.Fatal(err)
	}
	var g struct {
		X, Y             []float64
		Levels           []string
		UnweightedParams []float64 `json:"unweighted_params"`
		Theta            float64
		Rounds           int
		Params           []float64
		Cov              [][]float64
	}
	if err := json.Unmarshal(raw, &g); err != nil {
		t.Fatal(err)
	}
	pts := make([]Point, len(g.X))
	for i := range g.X {
		pts[i] = Point{Level: g.Levels[i/3], X: g.X[i], Y: g.Y[i]}
	}
	unw, err := Fit(pts, Options{Model: FourPL})
	if err != nil {
		t.Fatal(err)
	}
	for j, want := range g.UnweightedParams {
		if math.Abs(unw.Coefficients[j]-want) > 1e-6*math.Abs(want) {
			t.Errorf("unweighted coefficient %d: %v, scipy %v", j, unw.Coefficients[j], want)
		}
	}
	r, err := Fit(pts, Options{Model: FourPL, Weighting: WeightVarPower})
	if err != nil {
		t.Fatal(err)
	}
	cd := r.Curve
	if cd.Outcome != "converged" {
		t.Fatalf("outcome %s", cd.Outcome)
	}
	if math.Abs(cd.Theta-g.Theta) > 1e-6 || cd.ThetaIterations != g.Rounds {
		t.Errorf("θ = %v after %d round(s), scipy/numpy %v after %d", cd.Theta, cd.ThetaIterations, g.Theta, g.Rounds)
	}
	t.Logf("θ %v (scipy/numpy %v, difference %.1e), %d round(s)", cd.Theta, g.Theta, cd.Theta-g.Theta, cd.ThetaIterations)
	for j, want := range g.Params {
		if math.Abs(r.Coefficients[j]-want) > 1e-6*math.Abs(want) {
			t.Errorf("coefficient %d: %v, scipy %v", j, r.Coefficients[j], want)
		}
		for k, wc := range g.Cov[j] {
			if math.Abs(r.Covariance[j][k]-wc) > 1e-4*math.Sqrt(math.Abs(g.Cov[j][j]*g.Cov[k][k])) {
				t.Errorf("cov[%d][%d] = %v, scipy %v", j, k, r.Covariance[j][k], wc)
			}
		}
	}
}
