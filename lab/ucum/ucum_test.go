package ucum

import (
	"errors"
	"math"
	"strings"
	"testing"
)

func TestTableParses(t *testing.T) {
	for _, e := range Table() {
		if err := Validate(e.Code); err != nil {
			t.Errorf("table code %q: %v", e.Code, err)
		}
	}
}

// Every expected factor below is worked by hand from the SI prefixes
// (UCUM 2.1 prefix table, from memory) and the definitions 1 L = 1 dm³,
// 1 h = 3600 s, 1 [ppm] = 10⁻⁶, 1 % = 10⁻².
func TestConvertByHand(t *testing.T) {
	cases := []struct {
		v        float64
		from, to string
		want     float64
		how      string
	}{
		{1, "mg/L", "ug/L", 1000, "1 mg = 1000 ug"},
		{1, "ug/L", "ng/mL", 1, "1 ug/L = 1000 ng / 1000 mL"},
		{2.5, "mg/dL", "mg/L", 25, "1 dL = 0.1 L, so ×10"},
		{90, "mg/dL", "g/L", 0.9, "90 mg/dL = 900 mg/L = 0.9 g/L"},
		{15, "g/dL", "g/L", 150, "×10"},
		{7, "ug/dL", "ug/L", 70, "×10"},
		{350, "pg/mL", "ng/L", 350, "1 pg/mL = 1e-12 g / 1e-6 L = 1e-6 g/L = 1 ng/L"},
		{1.2, "ug/mL", "mg/L", 1.2, "1 ug/mL = 1e-6 g / 1e-3 L = 1e-3 g/L"},
		{0.004, "mg/mL", "ug/mL", 4, "×1000"},
		{3, "mg/kg", "ug/g", 3, "1e-3 g/1e3 g = 1e-6 g/g = 1 ug/g"},
		{3, "mg/kg", "[ppm]", 3, "mass fraction 1e-6 = 1 ppm"},
		{250, "ug/kg", "ng/g", 250, "1e-6/1e3 = 1e-9 = 1e-9/1"},
		{40, "ng/g", "[ppb]", 40, "1e-9"},
		{0.5, "%", "[ppm]", 5000, "0.5e-2 / 1e-6"},
		{12, "[ppth]", "%", 1.2, "1e-3 / 1e-2"},
		{5, "mmol/L", "umol/L", 5000, "×1000"},
		{80, "nmol/L", "pmol/L", 80000, "×1000"},
		{0.25, "mol/L", "mmol/L", 250, "×1000"},
		{1, "mL", "uL", 1000, "×1000"},
		{250, "uL", "L", 2.5e-4, "÷1e6"},
		{1.5, "kg", "g", 1500, "×1000"},
		{2, "h", "min", 120, "3600/60"},
		{1, "d", "h", 24, "86400/3600"},
		{90, "s", "min", 1.5, "90/60"},
		{600, "{counts}/min", "{counts}/s", 10, "per minute to per second ÷60"},
		{1, "m3", "L", 1000, "1 m³ = 1000 dm³"},
		{1, "cm3", "mL", 1, "1 cm³ = 1 mL, prefix inside the exponent"},
		{2, "mg/L", "g.m-3", 2, "1 mg/L = 1e-3 g / 1e-3 m³"},
		{6, "ug/L.mL/g", "ug/kg", 6, "((ug/L)·mL)/g: 1e-6/1e-3·1e-6/1 = 1e-9 = ug/kg"},
		{1, "/s", "/min", 60, "a leading slash: 1 per second = 60 per minute"},
		{4, "mg/L", "mg/l", 4, "l and L are both the litre"},
	}
	for _, c := range cases {
		got, err := Convert(c.v, c.from, c.to)
		if err != nil {
			t.Errorf("%v %s → %s: %v", c.v, c.from, c.to, err)
			continue
		}
		if math.Abs(got-c.want) > 1e-12*math.Abs(c.want) {
			t.Errorf("%v %s → %s = %.15g, want %g (%s)", c.v, c.from, c.to, got, c.want, c.how)
		}
	}
}

func TestCaseSensitive(t *testing.T) {
	for _, code := range []string{"mg/L", "ug/L", "umol/L", "[ppb]", "mL", "{cps}"} {
		if err := Validate(code); err != nil {
			t.Errorf("%q refused: %v", code, err)
		}
	}
	cases := []struct{ code, hint string }{
		{"MG/L", `"mg/L"`},
		{"UMOL/L", `"umol/L"`},
		{"[PPB]", `"[ppb]"`},
		{"G/L", `"g/L"`},
	}
	for _, c := range cases {
		err := Validate(c.code)
		var ue *Error
		if !errors.As(err, &ue) {
			t.Errorf("%q: err = %v, want *Error", c.code, err)
			continue
		}
		if !strings.Contains(err.Error(), "did you mean "+c.hint) || !strings.Contains(err.Error(), "case-sensitive") {
			t.Errorf("%q: error %q lacks the hint %s", c.code, err, c.hint)
		}
	}
	// Case changes the unit rather than failing where the other case is a
	// prefix: "Mg" is the megagram and "ML" the megalitre in UCUM.
	if k, err := Factor("Mg/L", "mg/L"); err != nil || k != 1e9 {
		t.Errorf("Mg/L → mg/L = %v, %v; want 1e9 (mega, not milli)", k, err)
	}
	if k, err := Factor("ML", "mL"); err != nil || k != 1e9 {
		t.Errorf("ML → mL = %v, %v; want 1e9", k, err)
	}
}

func TestUnknownRefused(t *testing.T) {
	for _, code := range []string{"banana", "", "mg/", "/", "mg//L", "mg/(L)", "10*3/L", "ppm", "AU", "{cps", "kmin", "c%", "mg.banana", "m0", "Ym9.Ym9", "ym9.ym9"} {
		err := Validate(code)
		if err == nil {
			t.Errorf("%q accepted", code)
			continue
		}
		if !strings.Contains(err.Error(), "accepted are") {
			t.Errorf("%q: error %q does not say what is accepted", code, err)
		}
	}
	if err := Validate("AU"); !strings.Contains(err.Error(), "{absorbance}") {
		t.Errorf("AU: error %q does not point to {absorbance}", err)
	}
}

func TestIncompatible(t *testing.T) {
	cases := [][2]string{
		{"mg/L", "mg/kg"},       // volume vs mass basis
		{"mg/L", "mmol/L"},      // needs a molar mass
		{"{cps}", "{counts}/s"}, // dimensionless annotation vs per time
		{"{cps}", "{absorbance}"},
		{"h", "L"},
	}
	for _, c := range cases {
		if _, err := Factor(c[0], c[1]); err == nil {
			t.Errorf("%s → %s converted", c[0], c[1])
		}
	}
	if _, err := Convert(math.NaN(), "mg/L", "ug/L"); err == nil {
		t.Error("NaN converted")
	}
}

// Molar masses: nitrate as N, 14.007 g/mol; glucose 180.16 g/mol (textbook
// values, from memory). Expected values worked by hand.
func TestConvertMolar(t *testing.T) {
	cases := []struct {
		v        float64
		from, to string
		mm       float64
		want     float64
		how      string
	}{
		{1, "mmol/L", "mg/L", 14.007, 14.007, "1e-3 mol/L × 14.007 g/mol = 14.007e-3 g/L"},
		{14.007, "mg/L", "mmol/L", 14.007, 1, "inverse"},
		{5.5, "mmol/L", "mg/dL", 180.16, 99.088, "5.5e-3 × 180.16 = 0.99088 g/L = 99.088 mg/dL"},
		{2, "mg/L", "ug/L", 99, 2000, "same dimension: the molar mass is ignored"},
		{3, "umol", "ug", 18, 54, "3e-6 mol × 18 g/mol = 54e-6 g"},
	}
	for _, c := range cases {
		got, err := ConvertMolar(c.v, c.from, c.to, c.mm)
		if err != nil {
			t.Errorf("%s → %s: %v", c.from, c.to, err)
			continue
		}
		if math.Abs(got-c.want) > 1e-12*math.Abs(c.want) {
			t.Errorf("%v %s → %s (M = %v) = %.15g, want %g (%s)", c.v, c.from, c.to, c.mm, got, c.want, c.how)
		}
	}
	for _, mm := range []float64{0, -1, math.NaN(), math.Inf(1)} {
		if _, err := ConvertMolar(1, "mmol/L", "mg/L", mm); err == nil {
			t.Errorf("molar mass %v accepted", mm)
		}
	}
	if _, err := ConvertMolar(1, "mmol/L", "mg/kg", 18); err == nil {
		t.Error("mmol/L → mg/kg converted with a molar mass alone")
	}
}

func TestDimension(t *testing.T) {
	for code, want := range map[string]string{"mg/L": "L-3·M", "mmol/L": "L-3·N", "%": "1", "{counts}/s": "T-1", "mL": "L3"} {
		u, err := Parse(code)
		if err != nil {
			t.Fatal(err)
		}
		if got := u.Dimension(); got != want {
			t.Errorf("%s: dimension %q, want %q", code, got, want)
		}
	}
}
