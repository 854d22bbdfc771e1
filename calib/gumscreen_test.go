package calib

import (
	"math"
	"strings"
	"testing"
)

// TestScreenGUM checks the screen on invented straight lines against hand
// computations of Fieller's g = t²·s²/(b1²·Sxx) (exactLine makes s(y/x)
// exactly s; t from a printed Student's t table, values from memory):
//   - 8 levels × 3, s = 0.02, b1 = 1: Sxx = 3·42 = 126, t(0.975; 22) = 2.074,
//     g = 2.074²·0.0004/126 = 1.37e-5: not in doubt, interval symmetric;
//   - 5 levels × 2, s = 0.9, b1 = 1: Sxx = 2·10 = 20, t(0.975; 8) = 2.306,
//     g = 2.306²·0.81/20 = 0.2154: in doubt (above 0.05);
//   - 5 levels × 2, s = 2.5: g = 2.306²·6.25/20 = 1.66 ≥ 1, so Fieller's
//     interval is open: in doubt for that reason.
func TestScreenGUM(t *testing.T) {
	for _, c := range []struct {
		name     string
		xs       []float64
		reps     int
		s, x0    float64
		g        float64
		inDoubt  bool
		reasonIs string
	}{
		{"well determined", []float64{1, 2, 3, 4, 5, 6, 7, 8}, 3, 0.02, 6, 2.074 * 2.074 * 0.0004 / 126, false, ""},
		{"weak slope", []float64{1, 2, 3, 4, 5}, 2, 0.9, 5, 2.306 * 2.306 * 0.81 / 20, true, "Fieller"},
		{"open interval", []float64{1, 2, 3, 4, 5}, 2, 2.5, 5, 2.306 * 2.306 * 6.25 / 20, true, "open"},
	} {
		rep := fitOrFatal(t, exactLine(c.xs, c.reps, 0.1, 1, c.s), Options{Model: Linear})
		pr, err := rep.Predict([]float64{0.1 + c.x0}, 1, 0)
		if err != nil {
			t.Fatal(err)
		}
		sc := rep.ScreenGUM(pr)
		if math.Abs(sc.FiellerG-c.g) > 2e-3*c.g { // the table's t has four figures
			t.Errorf("%s: g = %.6g, hand computation %.6g", c.name, sc.FiellerG, c.g)
		}
		if sc.InDoubt != c.inDoubt || !strings.Contains(sc.Reason, c.reasonIs) {
			t.Errorf("%s: screen %+v, want in doubt %v for %q", c.name, sc, c.inDoubt, c.reasonIs)
		}
		if !c.inDoubt && !(sc.Asymmetry < 1e-3) {
			t.Errorf("%s: asymmetry %v of a nearly exact ratio", c.name, sc.Asymmetry)
		}
	}
	var none Report
	if sc := none.ScreenGUM(Prediction{}); sc.InDoubt {
		t.Errorf("a prediction of a curve without a fit was screened: %+v", sc)
	}
}

// TestDecideInterval checks the guard band of an asymmetric interval by
// hand (upper limit 10, lower limit 7, result 8): the band at each limit is
// the interval's arm on that side; a symmetric interval gives Decide's
// statement.
func TestDecideInterval(t *testing.T) {
	for _, c := range []struct {
		name            string
		spec            Specification
		low, high       float64
		outcome         string
		acceptLo, accHi float64
	}{
		{"upper, short upper arm", UpperLimit(10, "mg/L"), 7, 9.5, OutcomePass, math.Inf(-1), 8.5},
		{"upper, long upper arm", UpperLimit(10, "mg/L"), 7.5, 10.5, OutcomeConditionalPass, math.Inf(-1), 7.5},
		{"lower, long lower arm", LowerLimit(7, "mg/L"), 6.5, 8.2, OutcomeConditionalPass, 8.5, math.Inf(1)},
		{"both", Between(7, 10, "mg/L"), 7.8, 9, OutcomePass, 7.2, 9},
	} {
		got, err := DecideInterval(8, c.low, c.high, c.spec, RuleGuardBand)
		if err != nil {
			t.Fatal(err)
		}
		if got.Outcome != c.outcome || math.Abs(got.AcceptLow-c.acceptLo) > 1e-12 && !math.IsInf(c.acceptLo, 0) ||
			math.Abs(got.AcceptHigh-c.accHi) > 1e-12 && !math.IsInf(c.accHi, 0) || len(got.Cautions) == 0 {
			t.Errorf("%s: %+v, want %s with acceptance limits [%v, %v]", c.name, got, c.outcome, c.acceptLo, c.accHi)
		}
	}
	want, _ := Decide(8, 1.5, Between(7, 10, "mg/L"), RuleGuardBand)
	got, _ := DecideInterval(8, 6.5, 9.5, Between(7, 10, "mg/L"), RuleGuardBand)
	if got.Outcome != want.Outcome || got.AcceptLow != want.AcceptLow || got.AcceptHigh != want.AcceptHigh || got.Expanded != want.Expanded {
		t.Errorf("symmetric interval %+v, Decide %+v", got, want)
	}
	if _, err := DecideInterval(8, 9, 7, UpperLimit(10, ""), RuleSimple); err == nil {
		t.Error("an interval with low > high was accepted")
	}
}
