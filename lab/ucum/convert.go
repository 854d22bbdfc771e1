package ucum

import (
	"fmt"
	"math"
)

// Compatible reports whether values in a can be converted to b: the same
// dimension and the same annotations.
func (a Unit) Compatible(b Unit) bool {
	return a.dim == b.dim && a.annotations == b.annotations
}

// Factor returns k such that a value v in from is k·v in to:
//
//	k = factor(from) / factor(to)
//
// Both codes must parse and be compatible (same dimension and annotations);
// otherwise a *Error names the dimensions.
func Factor(from, to string) (float64, error) {
	f, t, err := parsePair(from, to)
	if err != nil {
		return 0, err
	}
	if f.dim != t.dim {
		return 0, &Error{Code: from, Reason: fmt.Sprintf("cannot convert to %q: dimension %s is not %s", to, f.Dimension(), t.Dimension())}
	}
	if f.annotations != t.annotations {
		return 0, &Error{Code: from, Reason: fmt.Sprintf("cannot convert to %q: annotations %q and %q differ (UCUM reads both as 1, but they count different things)", to, f.annotations, t.annotations)}
	}
	return f.Factor / t.Factor, nil
}

// Convert returns v expressed in the unit to: v·Factor(from, to).
func Convert(v float64, from, to string) (float64, error) {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return 0, &Error{Code: from, Reason: fmt.Sprintf("value must be finite, got %v", v)}
	}
	k, err := Factor(from, to)
	if err != nil {
		return 0, err
	}
	return v * k, nil
}

// ConvertMolar converts between units that differ by amount of substance
// and mass, with the molar mass M in g/mol given explicitly:
//
//	dim(to) = dim(from) + n·(M − N),  n ∈ {−1, 0, 1}
//	v_to = v·factor(from)/factor(to)·M^n
//
// so mol/L → g/L multiplies by M (n = 1) and mg/L → mmol/L divides by it
// (n = −1); n = 0 is an ordinary conversion and ignores M. M must be finite
// and > 0. A molar mass is never assumed.
func ConvertMolar(v float64, from, to string, molarMass float64) (float64, error) {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return 0, &Error{Code: from, Reason: fmt.Sprintf("value must be finite, got %v", v)}
	}
	if math.IsNaN(molarMass) || math.IsInf(molarMass, 0) || !(molarMass > 0) {
		return 0, &Error{Code: from, Reason: fmt.Sprintf("molar mass must be a finite number of g/mol > 0, got %v", molarMass)}
	}
	f, t, err := parsePair(from, to)
	if err != nil {
		return 0, err
	}
	if f.annotations != t.annotations {
		return 0, &Error{Code: from, Reason: fmt.Sprintf("cannot convert to %q: annotations %q and %q differ", to, f.annotations, t.annotations)}
	}
	for n := -1; n <= 1; n++ {
		d := f.dim
		d[dimM] += n
		d[dimN] -= n
		if d == t.dim {
			return v * f.Factor / t.Factor * math.Pow(molarMass, float64(n)), nil
		}
	}
	return 0, &Error{Code: from, Reason: fmt.Sprintf("cannot convert to %q with a molar mass: dimension %s does not differ from %s by one mass per amount", to, f.Dimension(), t.Dimension())}
}

func parsePair(from, to string) (Unit, Unit, error) {
	f, err := Parse(from)
	if err != nil {
		return Unit{}, Unit{}, err
	}
	t, err := Parse(to)
	if err != nil {
		return Unit{}, Unit{}, err
	}
	return f, t, nil
}
