package lab

import (
	"testing"

	"curvekeeper/calib"
)

// The comparison finds a change in the last digit of one coefficient, and
// nothing else (invented readings).
func TestFlattenFindsOneChangedField(t *testing.T) {
	pts := []calib.Point{{Level: "a", X: 1, Y: 2.1}, {Level: "b", X: 2, Y: 3.9}, {Level: "c", X: 3, Y: 6.2}, {Level: "d", X: 4, Y: 7.8}}
	opts := calib.Options{Model: calib.Linear, Weighting: calib.WeightNone, Confidence: 0.95, Policy: calib.DefaultPolicy()}
	a, err := calib.Fit(pts, opts)
	if err != nil {
		t.Fatal(err)
	}
	b, _ := calib.Fit(pts, opts)
	fa, err := flatten(a)
	if err != nil {
		t.Fatal(err)
	}
	fb, _ := flatten(b)
	if len(fa) < 50 || len(fa) != len(fb) {
		t.Fatalf("flatten gave %d and %d leaves", len(fa), len(fb))
	}
	for k, v := range fa {
		if fb[k] != v {
			t.Errorf("two fits of the same readings differ at %s", k)
		}
	}
	b.Coefficients[1] = b.Coefficients[1] * (1 + 1e-15)
	fb, _ = flatten(b)
	var diff []string
	for k, v := range fa {
		if fb[k] != v {
			diff = append(diff, k)
		}
	}
	if len(diff) != 1 || diff[0] != "/Coefficients/1" {
		t.Errorf("differences %v, want only /Coefficients/1", diff)
	}
}
