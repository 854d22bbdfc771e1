package reported

import (
	"errors"
	"math"
	"strconv"
	"strings"
	"testing"
)

// soil is the worked example: a soil digest read at x̂0 = 12.36 ug/L after a
// tenfold dilution of the digest; 0.500 g of soil was digested and made up
// to 50 mL; dry matter 80 %. By hand:
//
//	12.36 ug/L × 10 × (50 mL / 0.5 g) ÷ 0.80 = 15450 ug/L·mL/g
//	ug/L·mL/g = ug·(1e-3 L)/(L·g) = ug/(1000 g) = ug/kg, so 15450 ug/kg = 15.45 mg/kg
//	three significant figures, round half to even: 15.45 → 15.4 (4 is even);
//	half away from zero: 15.5
func soil() Sample {
	return Sample{X0: 12.36, X0Unit: "ug/L", Dilution: 10, SampleAmount: 0.5, SampleAmountUnit: "g",
		FinalVolume: 50, FinalVolumeUnit: "mL", DryFraction: 0.8, HighestStandard: 50}
}

func TestReportedValueByHand(t *testing.T) {
	v, err := Report(soil(), Method{Unit: "mg/kg"})
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(v.Result-15.45) > 1e-12 || v.Text != "15.4" || v.Rounded != 15.4 {
		t.Errorf("result %.15g printed %q (%v), want 15.45 printed 15.4", v.Result, v.Text, v.Rounded)
	}
	if v.ComputedUnit != "ug/L.mL/g" || math.Abs(v.ConversionFactor-1e-3) > 1e-18 {
		t.Errorf("computed unit %q factor %v, want ug/L.mL/g and 1e-3 (ug/kg → mg/kg)", v.ComputedUnit, v.ConversionFactor)
	}
	if v.X0 != 12.36 || v.X0Unit != "ug/L" || len(v.Factors) != 4 {
		t.Errorf("x̂0 %v %s, factors %+v: x̂0 and every factor must stay in the output", v.X0, v.X0Unit, v.Factors)
	}
	want := []Factor{{"dilution", 10, "1", "×"}, {"final volume", 50, "mL", "×"}, {"sample amount", 0.5, "g", "÷"}, {"dry-matter fraction", 0.8, "1", "÷"}}
	for i := range want {
		if v.Factors[i] != want[i] {
			t.Errorf("factor %d = %+v, want %+v", i, v.Factors[i], want[i])
		}
	}
	if len(v.Qualifiers) != 0 || v.Rule != "3 significant figures, round half to even" || len(v.Cautions) == 0 {
		t.Errorf("qualifiers %v, rule %q, cautions %d", v.Qualifiers, v.Rule, len(v.Cautions))
	}
	v, err = Report(soil(), Method{Unit: "mg/kg", Rounding: Rounding{Mode: HalfAwayFromZero}})
	if err != nil {
		t.Fatal(err)
	}
	if v.Text != "15.5" {
		t.Errorf("half away from zero printed %q, want 15.5", v.Text)
	}
}

// TestQualifiersByHand: the soil result, 15.45 mg/kg, against limits.
//
//	RL 20, DL 5: 5 ≤ 15.45 < 20 → estimated, printed 15.4 with EV.
//	RL 20, DL 16: 15.45 < DL → "< 20" with LT.
//	RL 20, no DL: "< 20" with LT.
//	RL 10: 15.45 ≥ 10 → no qualifier.
//	x̂0 12.36 above a highest standard of 10 → OR, dilute and re-run.
//	IS failed → IS, with its detail.
func TestQualifiersByHand(t *testing.T) {
	cases := []struct {
		name   string
		rl, dl float64
		high   float64
		is     bool
		text   string
		codes  string
	}{
		{"estimated", 20, 5, 50, false, "15.4", "EV"},
		{"below DL", 20, 16, 50, false, "< 20", "LT"},
		{"below RL, no DL", 20, 0, 50, false, "< 20", "LT"},
		{"above RL", 10, 2, 50, false, "15.4", ""},
		{"over range", 10, 0, 10, false, "15.4", "OR"},
		{"IS failure", 10, 0, 50, true, "15.4", "IS"},
		{"estimated, IS failure", 20, 5, 50, true, "15.4", "EV IS"},
	}
	for _, c := range cases {
		s := soil()
		s.HighestStandard, s.ISFailed, s.ISDetail = c.high, c.is, "recovery 48 %"
		v, err := Report(s, Method{Unit: "mg/kg", ReportingLimit: c.rl, DetectionLimit: c.dl})
		if err != nil {
			t.Fatal(err)
		}
		var codes []string
		for _, q := range v.Qualifiers {
			codes = append(codes, q.Code)
		}
		if v.Text != c.text || strings.Join(codes, " ") != c.codes {
			t.Errorf("%s: %q %v, want %q %q", c.name, v.Text, codes, c.text, c.codes)
		}
		if c.high == 10 && !strings.Contains(v.Action, "dilute and re-run") {
			t.Errorf("%s: action %q", c.name, v.Action)
		}
		if c.is && !strings.Contains(v.Qualifiers[len(v.Qualifiers)-1].Words, "recovery 48 %") {
			t.Errorf("%s: IS words %q", c.name, v.Qualifiers[len(v.Qualifiers)-1].Words)
		}
	}
	// A laboratory's own letters replace the defaults; the others stay.
	v, err := Report(soil(), Method{Unit: "mg/kg", ReportingLimit: 20, DetectionLimit: 5,
		Qualifiers: Qualifiers{Estimated: Qualifier{"~", "approximate"}}})
	if err != nil {
		t.Fatal(err)
	}
	if len(v.Qualifiers) != 1 || v.Qualifiers[0] != (Qualifier{"~", "approximate"}) {
		t.Errorf("configured qualifier: %v", v.Qualifiers)
	}
}

// TestRound: decimal rounding worked by hand.
func TestRound(t *testing.T) {
	cases := []struct {
		v    float64
		r    Rounding
		want string
	}{
		{2.665, Rounding{}, "2.66"},                         // tie, 6 even
		{2.675, Rounding{}, "2.68"},                         // tie, 7 odd (as printed: the binary 2.67499… is taken as 2.675)
		{2.665, Rounding{Mode: HalfAwayFromZero}, "2.67"},   //
		{-2.665, Rounding{Mode: HalfAwayFromZero}, "-2.67"}, // away from zero
		{-2.665, Rounding{}, "-2.66"},                       //
		{2.6651, Rounding{}, "2.67"},                        // above the half
		{4.8, Rounding{}, "4.80"},                           // trailing zero kept
		{12345, Rounding{}, "12300"},                        // integer places
		{999.5, Rounding{}, "1000"},                         // tie, 9 odd: carry
		{0.012345, Rounding{}, "0.0123"},                    //
		{0, Rounding{}, "0.00"},                             //
		{1234.5678, Rounding{UseDecimals: true, Decimals: 2}, "1234.57"},
		{0.125, Rounding{UseDecimals: true, Decimals: 2}, "0.12"}, // tie, 2 even
		{0.125, Rounding{UseDecimals: true, Decimals: 2, Mode: HalfAwayFromZero}, "0.13"},
		{0.0004, Rounding{UseDecimals: true, Decimals: 2}, "0.00"},
		{0.006, Rounding{UseDecimals: true, Decimals: 2}, "0.01"},
		{0.005, Rounding{UseDecimals: true, Decimals: 2}, "0.00"}, // tie: 0 is even
		{0.005, Rounding{UseDecimals: true, Decimals: 2, Mode: HalfAwayFromZero}, "0.01"},
		{-0.001, Rounding{UseDecimals: true, Decimals: 1}, "0.0"}, // no negative zero
		{7, Rounding{UseDecimals: true}, "7"},
		{15.450000000000001, Rounding{}, "15.4"}, // binary noise of a product does not decide the tie
		{0.1 + 0.2, Rounding{SignificantFigures: 1}, "0.3"},
	}
	for _, c := range cases {
		got, val, err := c.r.Round(c.v)
		if err != nil {
			t.Errorf("%v %v: %v", c.v, c.r, err)
			continue
		}
		if got != c.want {
			t.Errorf("Round(%v) with %v = %q, want %q", c.v, c.r, got, c.want)
		}
		if want, _ := parse(c.want); val != want {
			t.Errorf("Round(%v) value %v, want %v", c.v, val, want)
		}
	}
	if _, _, err := (Rounding{SignificantFigures: 1}).Round(1.7e308); err == nil {
		t.Error("1.7e308 rounded up to 2e308 without an error")
	}
	for _, r := range []Rounding{{SignificantFigures: -1}, {SignificantFigures: 13}, {SignificantFigures: 2, UseDecimals: true}, {Mode: "up"}, {UseDecimals: true, Decimals: -1}} {
		if _, _, err := r.Round(1); err == nil {
			t.Errorf("rule %+v accepted", r)
		}
	}
}

func parse(s string) (float64, error) { return strconv.ParseFloat(s, 64) }

func TestReportRefused(t *testing.T) {
	cases := map[string]func(*Sample, *Method){
		"unknown unit":          func(_ *Sample, m *Method) { m.Unit = "banana" },
		"wrong case":            func(_ *Sample, m *Method) { m.Unit = "MG/KG" },
		"no mass for mg/kg":     func(s *Sample, _ *Method) { s.SampleAmount, s.FinalVolume = 0, 0 },
		"amount without volume": func(s *Sample, _ *Method) { s.FinalVolume = 0 },
		"dilution below 1":      func(s *Sample, _ *Method) { s.Dilution = 0.5 },
		"dry fraction above 1":  func(s *Sample, _ *Method) { s.DryFraction = 1.2 },
		"DL above RL":           func(_ *Sample, m *Method) { m.ReportingLimit, m.DetectionLimit = 1, 2 },
		"NaN":                   func(s *Sample, _ *Method) { s.X0 = math.NaN() },
		"volume as mass":        func(s *Sample, _ *Method) { s.SampleAmountUnit = "mL" },
	}
	for name, mutate := range cases {
		s, m := soil(), Method{Unit: "mg/kg"}
		mutate(&s, &m)
		var re *Error
		if _, err := Report(s, m); !errors.As(err, &re) {
			t.Errorf("%s: err = %v, want *Error", name, err)
		}
	}
	// A water sample: no preparation factors, ug/L read and mg/L reported.
	v, err := Report(Sample{X0: 2.5, X0Unit: "ug/L", Dilution: 4}, Method{Unit: "mg/L", Rounding: Rounding{SignificantFigures: 2}})
	if err != nil {
		t.Fatal(err)
	}
	if v.Text != "0.010" || len(v.Factors) != 1 {
		t.Errorf("2.5 ug/L × 4 = 10 ug/L = 0.010 mg/L; got %q, factors %v", v.Text, v.Factors)
	}
}
