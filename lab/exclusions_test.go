package lab_test

import (
	"errors"
	"fmt"
	"strings"
	"testing"

	"curvekeeper/calib"
	"curvekeeper/lab"
)

// points returns levels L1..Ln (concentrations 1..n) with reps readings each.
func points(levels, reps int) []calib.PointResult {
	var out []calib.PointResult
	for l := 1; l <= levels; l++ {
		for r := 0; r < reps; r++ {
			out = append(out, calib.PointResult{Level: fmt.Sprintf("L%d", l), X: float64(l), Y: 2 * float64(l)})
		}
	}
	return out
}

// TestPlanExclusion checks each rule of an exclusion (ICH M10 (2022): at most
// 25 % of standards excluded, at least six levels; the both-ends rule is this
// service's, documented on the route) on invented standards.
func TestPlanExclusion(t *testing.T) {
	tests := []struct {
		name         string
		levels, reps int
		req          []lab.ExcludedPoint
		rangeReason  string
		wantRules    []string // empty: accepted
		wantExcluded int
	}{
		{name: "one replicate", levels: 8, reps: 2, req: []lab.ExcludedPoint{{Level: "L4", Replicate: 2}}, wantExcluded: 1},
		{name: "whole level", levels: 8, reps: 2, req: []lab.ExcludedPoint{{Level: "L4"}}, wantExcluded: 2},
		{name: "exactly 25 %", levels: 8, reps: 2, req: []lab.ExcludedPoint{{Level: "L2"}, {Level: "L3"}}, wantExcluded: 4},
		{name: "over 25 %", levels: 8, reps: 2, req: []lab.ExcludedPoint{{Level: "L2", Replicate: 1}, {Level: "L3", Replicate: 1},
			{Level: "L4", Replicate: 1}, {Level: "L5", Replicate: 1}, {Level: "L6", Replicate: 1}}, wantRules: []string{lab.RuleMaxExcludedFraction}},
		{name: "five levels left", levels: 6, reps: 2, req: []lab.ExcludedPoint{{Level: "L3"}}, wantRules: []string{lab.RuleMinLevelsKept}},
		{name: "both ends without reason", levels: 8, reps: 2, req: []lab.ExcludedPoint{{Level: "L1"}, {Level: "L8"}}, wantRules: []string{lab.RuleBothRangeEnds}},
		{name: "both ends with reason", levels: 8, reps: 2, req: []lab.ExcludedPoint{{Level: "L1"}, {Level: "L8"}}, rangeReason: "detector saturated at L8, L1 below the blank", wantExcluded: 4},
		{name: "one end of both ends", levels: 8, reps: 2, req: []lab.ExcludedPoint{{Level: "L1"}, {Level: "L8", Replicate: 1}}, wantExcluded: 3},
		{name: "unknown level", levels: 8, reps: 2, req: []lab.ExcludedPoint{{Level: "L9"}}, wantRules: []string{lab.RuleKnownReading}},
		{name: "unknown replicate", levels: 8, reps: 2, req: []lab.ExcludedPoint{{Level: "L2", Replicate: 3}}, wantRules: []string{lab.RuleKnownReading}},
		{name: "several breaches at once", levels: 6, reps: 1, req: []lab.ExcludedPoint{{Level: "L1"}, {Level: "L6"}},
			wantRules: []string{lab.RuleMaxExcludedFraction, lab.RuleMinLevelsKept, lab.RuleBothRangeEnds}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			fit, excluded, err := lab.PlanExclusion(points(tc.levels, tc.reps), tc.req, tc.rangeReason, 6)
			if len(tc.wantRules) == 0 {
				if err != nil {
					t.Fatalf("refused: %v", err)
				}
				n := 0
				for _, p := range fit {
					if p.Excluded {
						n++
					}
				}
				if n != tc.wantExcluded || len(excluded) != tc.wantExcluded {
					t.Errorf("excluded %d points (%d listed), want %d", n, len(excluded), tc.wantExcluded)
				}
				return
			}
			var se *lab.Error
			if !errors.As(err, &se) || se.Kind != lab.KindInvalid {
				t.Fatalf("error = %v, want KindInvalid", err)
			}
			if len(se.Fields) != len(tc.wantRules) {
				t.Fatalf("%d breaches %v, want %d", len(se.Fields), se.Fields, len(tc.wantRules))
			}
			for i, rule := range tc.wantRules {
				if !strings.Contains(se.Fields[i].Message, "rule "+rule+":") {
					t.Errorf("breach %d = %q, want rule %s", i, se.Fields[i].Message, rule)
				}
			}
		})
	}
}

// TestPlanExclusionKeepsEarlierExclusions: a revision of a revision keeps
// what the first excluded and counts it against the 25 %.
func TestPlanExclusionKeepsEarlierExclusions(t *testing.T) {
	pts := points(8, 2)
	pts[0].Excluded, pts[2].Excluded, pts[4].Excluded = true, true, true // L1, L2, L3 replicate 1
	_, _, err := lab.PlanExclusion(pts, []lab.ExcludedPoint{{Level: "L4", Replicate: 1}, {Level: "L5", Replicate: 1}}, "", 6)
	var se *lab.Error
	if !errors.As(err, &se) || !strings.Contains(se.Message, lab.RuleMaxExcludedFraction) {
		t.Fatalf("5 of 16 with earlier exclusions: error = %v, want rule %s", err, lab.RuleMaxExcludedFraction)
	}
	fit, excluded, err := lab.PlanExclusion(pts, []lab.ExcludedPoint{{Level: "L4", Replicate: 1}}, "", 6)
	if err != nil {
		t.Fatal(err)
	}
	if len(excluded) != 4 || !fit[0].Excluded || !fit[6].Excluded || fit[7].Excluded {
		t.Errorf("excluded %v; want L1/1, L2/1, L3/1 and L4/1", excluded)
	}
	if _, _, err := lab.PlanExclusion(pts, []lab.ExcludedPoint{{Level: "L1", Replicate: 1}}, "", 6); err == nil || !strings.Contains(err.Error(), lab.RuleExcludesNew) {
		t.Errorf("excluding only what is excluded already: error = %v, want rule %s", err, lab.RuleExcludesNew)
	}
}
