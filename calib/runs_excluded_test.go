package calib_test

import (
	"cmp"
	"slices"
	"testing"

	"curvekeeper/calib"
)

// TestResidualRunsWithExcludedPoints: the runs test counts the sign runs of
// the fitted readings only, in concentration order, whatever readings are
// excluded. The expected count is taken by hand from the reported points.
func TestResidualRunsWithExcludedPoints(t *testing.T) {
	// Invented data with a visible curvature, two replicates per level.
	xs := []float64{1, 2, 3, 4, 5, 6, 7, 8}
	var pts []calib.Point
	for i, x := range xs {
		y := 2 + 3*x - 0.12*x*x
		pts = append(pts,
			calib.Point{Level: string(rune('A' + i)), X: x, Y: y * 1.01},
			calib.Point{Level: string(rune('A' + i)), X: x, Y: y * 0.995})
	}
	for _, excluded := range [][]int{nil, {0}, {3, 9}, {1, 6, 14}} {
		p := slices.Clone(pts)
		for _, i := range excluded {
			p[i].Excluded = true
		}
		rep, err := calib.Fit(p, calib.Options{Model: calib.Linear, Weighting: calib.WeightNone})
		if err != nil {
			t.Fatalf("excluded %v: %v", excluded, err)
		}
		var fitted []calib.PointResult
		for _, pr := range rep.Points {
			if !pr.Excluded {
				fitted = append(fitted, pr)
			}
		}
		slices.SortStableFunc(fitted, func(a, b calib.PointResult) int {
			return cmp.Or(cmp.Compare(a.X, b.X), cmp.Compare(a.Y, b.Y))
		})
		runs, last := 0, 0
		for _, pr := range fitted {
			sg := 1
			if pr.Residual < 0 {
				sg = -1
			}
			if sg != last {
				runs++
				last = sg
			}
		}
		var got *calib.Check
		for i := range rep.Checks {
			if rep.Checks[i].Name == calib.CheckResidualRuns {
				got = &rep.Checks[i]
			}
		}
		if got == nil || !got.Computed {
			t.Fatalf("excluded %v: residual_runs missing or not computed: %+v", excluded, got)
		}
		if int(got.Statistic) != runs {
			t.Errorf("excluded %v: residual_runs statistic %v, want %d runs counted from the fitted points", excluded, got.Statistic, runs)
		}
	}
}
