package calib_test

import (
	"encoding/json"
	"reflect"
	"testing"

	"curvekeeper/calib"
)

// TestPredictAfterJSONRoundTrip: a Report stored as JSON and loaded again
// predicts exactly as the original (Predict reads only exported fields).
func TestPredictAfterJSONRoundTrip(t *testing.T) {
	pts := []calib.Point{
		{Level: "L1", X: 0.5, Y: 0.0372}, {Level: "L1", X: 0.5, Y: 0.0355},
		{Level: "L2", X: 1, Y: 0.0610}, {Level: "L2", X: 1, Y: 0.0588},
		{Level: "L3", X: 2, Y: 0.1093}, {Level: "L3", X: 2, Y: 0.1071},
		{Level: "L4", X: 5, Y: 0.2589}, {Level: "L4", X: 5, Y: 0.2517},
		{Level: "L5", X: 10, Y: 0.4860}, {Level: "L5", X: 10, Y: 0.5011},
		{Level: "L6", X: 20, Y: 0.9736}, {Level: "L6", X: 20, Y: 0.9421},
		{Level: "L7", X: 50, Y: 2.4480}, {Level: "L7", X: 50, Y: 2.3928},
		{Level: "L8", X: 100, Y: 4.7488}, {Level: "L8", X: 100, Y: 4.8947},
	}
	tests := []struct {
		name string
		opt  calib.Options
	}{
		{"linear 1/x^2", calib.Options{Model: calib.Linear, Weighting: calib.WeightInvX2}},
		{"linear 1/s^2", calib.Options{Model: calib.Linear, Weighting: calib.WeightInvS2}},
		{"linear 1/y^2", calib.Options{Model: calib.Linear, Weighting: calib.WeightInvY2}},
		{"origin none", calib.Options{Model: calib.LinearOrigin}},
		{"quadratic 1/x", calib.Options{Model: calib.Quadratic, Weighting: calib.WeightInvX}},
		{"auto", calib.Options{Model: calib.Linear, Weighting: calib.WeightAuto}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			rep, err := calib.Fit(pts, tc.opt)
			if err != nil {
				t.Fatal(err)
			}
			blob, err := json.Marshal(rep)
			if err != nil {
				t.Fatal(err)
			}
			var back calib.Report
			if err := json.Unmarshal(blob, &back); err != nil {
				t.Fatal(err)
			}
			for _, ys := range [][]float64{{0.03}, {0.75, 0.77}, {2.6}, {6.1}, {-0.01}} {
				want, err := rep.Predict(ys, 4, 0)
				if err != nil {
					t.Fatal(err)
				}
				got, err := back.Predict(ys, 4, 0)
				if err != nil {
					t.Fatal(err)
				}
				if !reflect.DeepEqual(got, want) {
					t.Errorf("responses %v: after JSON round trip got %+v, want %+v", ys, got, want)
				}
			}
		})
	}
}
