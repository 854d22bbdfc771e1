package sequence

import (
	"errors"
	"math"
	"strings"
	"testing"
	"time"
)

var t0 = time.Date(2026, 3, 2, 8, 0, 0, 0, time.UTC)

// build numbers the injections 1, 2, … and times them 6 minutes apart.
func build(in ...Injection) []Injection {
	for i := range in {
		in[i].Position = i + 1
		in[i].Time = t0.Add(time.Duration(i) * 6 * time.Minute)
	}
	return in
}

func std(id string, nominal, resp, is float64) Injection {
	return Injection{ID: id, Kind: CalibrationStandard, Nominal: nominal, Response: resp, ISResponse: is}
}
func ccv(id string, found float64) Injection {
	return Injection{ID: id, Kind: CCV, Nominal: 50, Found: found}
}
func ccb(id string, result float64) Injection {
	return Injection{ID: id, Kind: CCB, Result: result}
}
func smp(id string, result float64) Injection {
	return Injection{ID: id, Kind: Sample, Result: result}
}

// workedBatch is the worked example of TestFailingCCVWithholdsSinceLastPass.
func workedBatch() []Injection {
	return build(
		std("STD1", 1, 1000, 50000), // 1
		std("STD2", 10, 10100, 49000),
		std("STD3", 100, 99000, 51000), // 3, highest standard
		Injection{ID: "CB", Kind: CalibrationBlank, Response: 150, ISResponse: 2000}, // 4, carry-over blank
		Injection{ID: "ICV", Kind: ICV, Nominal: 50, Found: 51},                      // 5: 102 %
		ccb("CCB1", 0.02),                              // 6
		smp("S1", 3.1), smp("S2", 4.2), smp("S3", 5.3), // 7–9
		ccv("CCV1", 49),                                // 10: 98 %
		ccb("CCB2", -0.01),                             // 11
		smp("S4", 6.4), smp("S5", 7.5), smp("S6", 8.6), // 12–14
		ccv("CCV2", 43),   // 15: 86 % < 90 %: fails
		ccb("CCB3", 0.03), // 16
		smp("S7", 9.7),    // 17
		ccv("CCV3", 50.5), // 18: 101 %
		smp("S8", 10.8),   // 19
		ccv("CCV4", 52),   // 20: 104 %
	)
}

// TestFailingCCVWithholdsSinceLastPass works a batch by hand:
//
//	ICV at 5 passes (51/50 = 102 %), CCV1 at 10 passes (98 %): S1–S3 are
//	bracketed by 5 and 10, reportable. CCV2 at 15 reads 43/50 = 86 %, outside
//	90–110 % (default, common practice for EPA 200.8-type methods, from
//	memory): S4–S6, the samples since the last passing check at 10, are
//	withheld, and exactly those. S7 follows the failed CCV with no passing
//	verification before it: withheld. CCV3 at 18 passes and opens a new
//	bracket; CCV4 at 20 passes: S8 is reportable, bracketed by 18 and 20.
func TestFailingCCVWithholdsSinceLastPass(t *testing.T) {
	ev, err := Evaluate(Sequence{Injections: workedBatch(), Complete: true}, Config{ReportingLimit: 0.5})
	if err != nil {
		t.Fatal(err)
	}
	want := map[string]struct {
		state            State
		opening, closing int
	}{
		"S1": {Reportable, 5, 10}, "S2": {Reportable, 5, 10}, "S3": {Reportable, 5, 10},
		"S4": {Withheld, 10, 0}, "S5": {Withheld, 10, 0}, "S6": {Withheld, 10, 0},
		"S7": {Withheld, 0, 18},
		"S8": {Reportable, 18, 20},
	}
	if len(ev.Samples) != len(want) {
		t.Fatalf("%d samples, want %d", len(ev.Samples), len(want))
	}
	for _, s := range ev.Samples {
		w := want[s.ID]
		if s.State != w.state || s.Opening != w.opening || s.Closing != w.closing {
			t.Errorf("%s: %s [%d, %d], want %s [%d, %d]; reason: %s", s.ID, s.State, s.Opening, s.Closing, w.state, w.opening, w.closing, s.Reason)
		}
	}
	s4 := ev.Samples[3]
	for _, words := range []string{"CCV2 at position 15 failed", "86.0 %", "since the last passing check at position 10"} {
		if !strings.Contains(s4.Reason, words) {
			t.Errorf("S4's reason %q lacks %q", s4.Reason, words)
		}
	}
	if !strings.Contains(ev.Samples[6].Reason, "follows CCV CCV2 at position 15 failed") {
		t.Errorf("S7's reason %q", ev.Samples[6].Reason)
	}
	if len(ev.Breaches) != 0 {
		t.Errorf("breaches %+v, want none", ev.Breaches)
	}
	if len(ev.Cautions) == 0 {
		t.Error("no cautions")
	}
}

// TestCarryOverByHand: the blank after the highest standard (STD3) reads
// 150 for the analyte and 2000 for the IS. LLOQ response = the lowest
// standard's 1000, limit 20 % = 200, 150 = 15 % passes; IS reference =
// (50000 + 49000 + 51000)/3 = 50000, limit 5 % = 2500, 2000 = 4 % passes
// (ICH M10 §3.2.6). With an IS of 3000 (6 %) the check fails, and an
// analyte of 201 (20.1 %) fails it too.
func TestCarryOverByHand(t *testing.T) {
	ev, err := Evaluate(Sequence{Injections: workedBatch()}, Config{ReportingLimit: 0.5})
	if err != nil {
		t.Fatal(err)
	}
	co := ev.CarryOver
	if !co.Evaluated || !co.Passed || co.HighestStandard != 3 || co.BlankPosition != 4 {
		t.Fatalf("carry-over %+v", co)
	}
	for _, c := range []struct {
		what      string
		got, want float64
	}{{"analyte limit", co.AnalyteLimit, 200}, {"analyte %", co.AnalytePct, 15}, {"IS limit", co.ISLimit, 2500}, {"IS %", co.ISPct, 4}} {
		if math.Abs(c.got-c.want) > 1e-9 {
			t.Errorf("%s = %v, want %v (by hand)", c.what, c.got, c.want)
		}
	}
	for _, c := range []struct {
		resp, is      float64
		analyte, isOK bool
	}{{150, 3000, true, false}, {201, 2000, false, true}, {200, 2500, true, true}} {
		inj := workedBatch()
		inj[3].Response, inj[3].ISResponse = c.resp, c.is
		ev, err := Evaluate(Sequence{Injections: inj}, Config{ReportingLimit: 0.5})
		if err != nil {
			t.Fatal(err)
		}
		co := ev.CarryOver
		if co.AnalytePassed != c.analyte || co.ISPassed != c.isOK || co.Passed != (c.analyte && c.isOK) {
			t.Errorf("blank %v/%v: analyte %v IS %v passed %v; %s", c.resp, c.is, co.AnalytePassed, co.ISPassed, co.Passed, co.Detail)
		}
		if !co.Passed && !strings.Contains(strings.Join(ev.Samples[0].Notes, " "), "carry-over check failed") {
			t.Errorf("a failed carry-over is not noted on the samples: %v", ev.Samples[0].Notes)
		}
	}
	// No blank right after the highest standard: not evaluated, said so.
	inj := workedBatch()
	inj[3].Kind = Sample
	ev, err = Evaluate(Sequence{Injections: inj}, Config{ReportingLimit: 0.5})
	if err != nil {
		t.Fatal(err)
	}
	if ev.CarryOver.Evaluated || !strings.Contains(ev.CarryOver.Detail, "no blank directly follows") {
		t.Errorf("carry-over %+v", ev.CarryOver)
	}
}

// TestFrequencyBreach: at most 3 samples and 45 minutes between
// verifications. ICV at 1, then 5 samples (positions 2–6, 6 minutes apart),
// CCV at 7 (36 minutes after the ICV); the 4th sample (position 5) breaks
// the count rule once. Then 8 samples spaced 6 minutes and a CCV at 16,
// 54 minutes after 7: a time breach and a second count breach (position 11).
func TestFrequencyBreach(t *testing.T) {
	in := []Injection{{ID: "ICV", Kind: ICV, Nominal: 50, Found: 50}}
	for i := 0; i < 5; i++ {
		in = append(in, smp("A", 1))
	}
	in = append(in, ccv("CCV1", 50))
	for i := 0; i < 8; i++ {
		in = append(in, smp("B", 1))
	}
	in = append(in, ccv("CCV2", 50))
	ev, err := Evaluate(Sequence{Injections: build(in...), Complete: true}, Config{MaxSamplesBetweenChecks: 3, MaxTimeBetweenChecks: 45 * time.Minute})
	if err != nil {
		t.Fatal(err)
	}
	want := []Breach{{Rule: RuleSamplesBetweenChecks, Position: 5}, {Rule: RuleSamplesBetweenChecks, Position: 11}, {Rule: RuleTimeBetweenChecks, Position: 16}}
	if len(ev.Breaches) != len(want) {
		t.Fatalf("breaches %+v, want %v", ev.Breaches, want)
	}
	for i, b := range ev.Breaches {
		if b.Rule != want[i].Rule || b.Position != want[i].Position {
			t.Errorf("breach %d: %s at %d, want %s at %d (%s)", i, b.Rule, b.Position, want[i].Rule, want[i].Position, b.Detail)
		}
	}
	if !strings.Contains(ev.Breaches[2].Detail, "54m0s") {
		t.Errorf("time breach %q does not give the 54 minutes", ev.Breaches[2].Detail)
	}
	// The breach is reported and noted; the samples stay reportable.
	if s := ev.Samples[3]; s.State != Reportable || len(s.Notes) == 0 {
		t.Errorf("4th sample: %s, notes %v", s.State, s.Notes)
	}
	if s := ev.Samples[2]; len(s.Notes) != 0 {
		t.Errorf("3rd sample noted: %v", s.Notes)
	}
}

// TestClosingCheckMissing: a complete sequence whose last samples follow
// its last CCV breaks the closing rule; those samples are withheld. The same
// injections in a running sequence leave them provisional, with no breach.
func TestClosingCheckMissing(t *testing.T) {
	in := build(Injection{ID: "ICV", Kind: ICV, Nominal: 50, Found: 50}, smp("S1", 1), ccv("CCV1", 50), smp("S2", 1), smp("S3", 1))
	ev, err := Evaluate(Sequence{Injections: in, Complete: true}, Config{})
	if err != nil {
		t.Fatal(err)
	}
	if len(ev.Breaches) != 1 || ev.Breaches[0].Rule != RuleClosingCheckMissing || ev.Breaches[0].Position != 5 {
		t.Fatalf("breaches %+v, want closing_check_missing at 5", ev.Breaches)
	}
	states := []State{Reportable, Withheld, Withheld}
	for i, s := range ev.Samples {
		if s.State != states[i] {
			t.Errorf("%s: %s, want %s (%s)", s.ID, s.State, states[i], s.Reason)
		}
	}
	ev, err = Evaluate(Sequence{Injections: in}, Config{})
	if err != nil {
		t.Fatal(err)
	}
	if len(ev.Breaches) != 0 || ev.Samples[1].State != Provisional || ev.Samples[2].Opening != 3 {
		t.Errorf("running sequence: breaches %v, S2 %s opened at %d", ev.Breaches, ev.Samples[1].State, ev.Samples[2].Opening)
	}
	// With the closing check optional, the complete sequence has no breach.
	ev, err = Evaluate(Sequence{Injections: in, Complete: true}, Config{ClosingCheckOptional: true})
	if err != nil {
		t.Fatal(err)
	}
	if len(ev.Breaches) != 0 {
		t.Errorf("optional closing check: breaches %v", ev.Breaches)
	}
}

// TestCCBAndJudgedChecks: a passing CCV followed by a failing CCB (|0.7| >
// RL 0.5) is one check point that fails; a verification judged elsewhere is
// taken as judged; a recalibration withholds the samples it interrupts.
func TestCCBAndJudgedChecks(t *testing.T) {
	in := build(
		Injection{ID: "ICV", Kind: ICV, Judged: Pass},
		smp("S1", 1),
		ccv("CCV1", 50), ccb("CCB1", 0.7), // fails on the blank
		smp("S2", 1),
		Injection{ID: "CCV2", Kind: CCV, Judged: Fail, Reason: "drift seen by the analyst"},
		std("R1", 1, 1000, 0), std("R2", 10, 10000, 0),
		Injection{ID: "ICV2", Kind: ICV, Nominal: 5, Found: 5.2},
		smp("S3", 1),
		std("R3", 1, 1000, 0),
		Injection{ID: "ICV3", Kind: ICV, Nominal: 5, Found: 5},
		smp("S4", 1), ccv("CCV3", 50),
	)
	ev, err := Evaluate(Sequence{Injections: in, Complete: true}, Config{ReportingLimit: 0.5})
	if err != nil {
		t.Fatal(err)
	}
	want := []struct {
		state State
		words string
	}{
		{Withheld, "CCB CCB1 at position 4 failed"},
		{Withheld, "CCV CCV2 at position 6 failed (fail (judged before evaluation): drift seen by the analyst)"},
		{Withheld, "recalibrated at position 11"},
		{Reportable, "positions 12 and 14"},
	}
	for i, s := range ev.Samples {
		if s.State != want[i].state || !strings.Contains(s.Reason, want[i].words) {
			t.Errorf("%s: %s %q, want %s with %q", s.ID, s.State, s.Reason, want[i].state, want[i].words)
		}
	}
}

// TestBlankSubtraction: method blanks 0.1 and 0.3 give a mean of 0.2,
// subtracted from 5.0 to give 4.8 (by hand). A method blank of 0.6 above
// the limit (0.5 × LLOQ 1.0 = 0.5) is noted on every sample.
func TestBlankSubtraction(t *testing.T) {
	in := build(
		Injection{ID: "ICV", Kind: ICV, Nominal: 50, Found: 50},
		Injection{ID: "MB1", Kind: MethodBlank, Result: 0.1},
		smp("S1", 5.0),
		Injection{ID: "MB2", Kind: MethodBlank, Result: 0.3},
		ccv("CCV", 50),
	)
	cfg := Config{BlankSubtraction: SubtractMeanMethodBlank, LLOQ: 1, BlankFractionOfLLOQ: 0.5}
	ev, err := Evaluate(Sequence{Injections: in, Complete: true}, cfg)
	if err != nil {
		t.Fatal(err)
	}
	s := ev.Samples[0]
	if !ev.Blank.Applied || math.Abs(ev.Blank.Value-0.2) > 1e-15 || math.Abs(s.Net-4.8) > 1e-15 || s.Blank != ev.Blank.Value {
		t.Errorf("blank %+v, sample %+v", ev.Blank, s)
	}
	if !strings.Contains(ev.Blank.Statement, "2 method blank(s), 0.2") {
		t.Errorf("statement %q", ev.Blank.Statement)
	}
	in[3].Result = 0.6
	ev, err = Evaluate(Sequence{Injections: in, Complete: true}, cfg)
	if err != nil {
		t.Fatal(err)
	}
	if notes := strings.Join(ev.Samples[0].Notes, " "); !strings.Contains(notes, "method blank MB2 at position 4 exceeds its limit: |0.6| > 0.5 (0.5 × LLOQ 1)") {
		t.Errorf("notes %q", notes)
	}
	ev, err = Evaluate(Sequence{Injections: in, Complete: true}, Config{ReportingLimit: 1})
	if err != nil {
		t.Fatal(err)
	}
	if ev.Blank.Applied || ev.Samples[0].Net != 5.0 || !strings.Contains(ev.Blank.Statement, "no blank subtraction") {
		t.Errorf("policy none: %+v, net %v", ev.Blank, ev.Samples[0].Net)
	}
}

func TestRefused(t *testing.T) {
	cases := map[string]struct {
		in  []Injection
		cfg Config
	}{
		"duplicate position":  {[]Injection{{ID: "a", Kind: Sample, Position: 1}, {ID: "b", Kind: Sample, Position: 1}}, Config{}},
		"position 0":          {[]Injection{{ID: "a", Kind: Sample}}, Config{}},
		"unknown kind":        {[]Injection{{ID: "a", Kind: "tune", Position: 1}}, Config{}},
		"blank without limit": {build(ccb("CCB", 0.1)), Config{}},
		"CCV without nominal": {build(Injection{ID: "c", Kind: CCV, Found: 3}), Config{}},
		"bad window":          {build(smp("s", 1)), Config{Verification: Window{110, 90}}},
		"bad policy":          {build(smp("s", 1)), Config{BlankSubtraction: "median"}},
		"NaN":                 {build(smp("s", math.NaN())), Config{}},
	}
	for name, c := range cases {
		var se *Error
		if _, err := Evaluate(Sequence{Injections: c.in}, c.cfg); !errors.As(err, &se) {
			t.Errorf("%s: err = %v, want *Error", name, err)
		}
	}
}

// TestISRecovery: the standards' IS responses 50000, 49000, 51000 average
// 50000; a sample reading 29000 recovers 58 % (outside 60–125 %, common
// ICP-MS practice, from memory) and is noted; one at 62500 recovers 125 %
// and passes (ends included). By hand.
func TestISRecovery(t *testing.T) {
	in := workedBatch()
	in[6].ISResponse = 29000 // S1
	in[7].ISResponse = 62500 // S2
	ev, err := Evaluate(Sequence{Injections: in, Complete: true}, Config{ReportingLimit: 0.5})
	if err != nil {
		t.Fatal(err)
	}
	s1, s2, s3 := ev.Samples[0], ev.Samples[1], ev.Samples[2]
	if !s1.HasIS || s1.IS.Passed || math.Abs(s1.IS.RecoveryPct-58) > 1e-12 || !strings.Contains(strings.Join(s1.Notes, " "), "58.0 % outside 60–125 %") {
		t.Errorf("S1: %+v, notes %v", s1.IS, s1.Notes)
	}
	if !s2.HasIS || !s2.IS.Passed || math.Abs(s2.IS.RecoveryPct-125) > 1e-12 || len(s2.Notes) != 0 {
		t.Errorf("S2: %+v, notes %v", s2.IS, s2.Notes)
	}
	if s3.HasIS {
		t.Errorf("S3 has no IS response but was checked: %+v", s3.IS)
	}
	if s1.State != Reportable {
		t.Errorf("S1's state %s: an IS failure is noted, not decided here", s1.State)
	}
}
