package calib

import (
	"math"
	"strconv"
)

// DefaultVerificationTolerancePct is the default limit of a calibration
// verification (ICV/CCV): the concentration found must lie within ±20 % of
// the nominal value, after US EPA SW-846 Method 8000D (calibration
// verification, [M]: recalled, confirm the clause against the method). It is
// a default only: the laboratory's method overrides it, and its
// accreditation, regulator and SOP come first.
const DefaultVerificationTolerancePct = 20

// VerificationSource names where the default verification limit comes from.
const VerificationSource = "US EPA SW-846 Method 8000D calibration verification (default ±20 %); the laboratory's method overrides it"

// Verification is the check of a curve with a standard of known
// concentration measured after calibration (an initial or continuing
// calibration verification, ICV/CCV).
type Verification struct {
	Nominal       float64 // the standard's nominal concentration, > 0
	Found         float64 // concentration read back from the curve; meaningless when HasFound is false
	HasFound      bool    // false when the curve has no root for the mean response
	RecoveryPct   float64 // 100·found/nominal
	DifferencePct float64 // %D = 100·(found − nominal)/nominal
	LimitPct      float64 // |%D| allowed
	Passed        bool
	Prediction    Prediction // the inverse prediction behind Found
	Detail        string
	Cautions      []string
}

// Verify reads a verification standard back from the curve and compares it
// with its nominal value:
//
//	found = f⁻¹(ȳ) (Predict, dilution 1), recovery = 100·found/nominal,
//	%D = 100·(found − nominal)/nominal, passed ⇔ |%D| ≤ limitPct.
//
// %D against the nominal value is the calibration-verification measure of US
// EPA SW-846 Method 8000D [M]; limitPct 0 means
// DefaultVerificationTolerancePct. Preconditions: a fitted report, responses
// non-empty and finite, nominal finite and > 0, limitPct finite and ≥ 0;
// otherwise a *InputError. A response with no root on the curve fails the
// verification (HasFound false), it is not an error.
func (r *Report) Verify(responses []float64, nominal, limitPct float64) (Verification, error) {
	if math.IsNaN(nominal) || math.IsInf(nominal, 0) || !(nominal > 0) {
		return Verification{}, inputErr("concentration", "nominal concentration must be a finite number > 0, got %v", nominal)
	}
	if math.IsNaN(limitPct) || math.IsInf(limitPct, 0) || limitPct < 0 {
		return Verification{}, inputErr("limit_pct", "limit must be a finite number ≥ 0, got %v", limitPct)
	}
	if limitPct == 0 {
		limitPct = DefaultVerificationTolerancePct
	}
	pr, err := r.Predict(responses, 1, 0)
	if err != nil {
		return Verification{}, err
	}
	v := Verification{Nominal: nominal, LimitPct: limitPct, Prediction: pr, Cautions: Cautions()}
	if !pr.HasEstimate() {
		v.Detail = "the curve gives no single concentration for the mean response " + fmtG(pr.MeanResponse) + " (" + pr.Method + "): the verification fails"
		return v, nil
	}
	v.Found, v.HasFound = pr.Concentration, true
	v.RecoveryPct = 100 * pr.Concentration / nominal
	v.DifferencePct = 100 * (pr.Concentration - nominal) / nominal
	if math.IsInf(v.RecoveryPct, 0) || math.IsInf(v.DifferencePct, 0) {
		return Verification{}, inputErr("concentration", "nominal concentration %v is too small for a relative difference", nominal)
	}
	v.Passed = math.Abs(v.DifferencePct) <= limitPct
	verdict := "within"
	if !v.Passed {
		verdict = "outside"
	}
	v.Detail = "found " + fmtG(v.Found) + " against nominal " + fmtG(nominal) + ": recovery " +
		strconv.FormatFloat(v.RecoveryPct, 'f', 1, 64) + " %, %D " + strconv.FormatFloat(v.DifferencePct, 'f', 1, 64) +
		" %, " + verdict + " ±" + fmtG(limitPct) + " %"
	return v, nil
}
