package lab

import (
	"math"
	"time"

	"curvekeeper/calib"
)

// QCPolicy holds a method's settings for the QC loop: how verification
// standards are judged and which curve is in force. The defaults are
// defaults only; the laboratory's method, accreditation and SOP come first.
type QCPolicy struct {
	// VerificationTolerancePct is the |%D| an ICV/CCV may show against its
	// nominal value; 0 means calib.DefaultVerificationTolerancePct (±20 %,
	// after US EPA SW-846 Method 8000D).
	VerificationTolerancePct float64 `json:"verification_tolerance_pct,omitempty"`
	// PendingCurvesInForce lets a passing curve that awaits review be the
	// curve in force (default false: only approved curves are).
	PendingCurvesInForce bool `json:"pending_curves_in_force,omitempty"`
	// MaxCurveAgeHours, when > 0, is how long after its acquisition a curve
	// stays in force; 0 means no limit.
	MaxCurveAgeHours float64 `json:"max_curve_age_hours,omitempty"`
	// AllowSelfReview lets the principal that posted a run, or made a
	// revision, review its curve (default false: the four-eyes rule,
	// CheckReview). A method sets it only where the lab's SOP allows one
	// person to do both.
	AllowSelfReview bool `json:"allow_self_review,omitempty"`
	// Signatures is what approving a curve of the method takes: "" (a
	// signed approval or the unsigned review route of a token),
	// SignaturesApproval (a person's signed approval only) or
	// SignaturesReviewAndApproval (a signed review, then a signed approval
	// by another person, before results are releasable).
	Signatures string `json:"signatures,omitempty"`
}

// The values of QCPolicy.Signatures besides "".
const (
	SignaturesApproval          = "approval"
	SignaturesReviewAndApproval = "review_and_approval"
)

// DefaultQCPolicy returns the defaults: ±20 % verification tolerance (US EPA
// SW-846 Method 8000D), only approved curves in force, no maximum age.
func DefaultQCPolicy() QCPolicy {
	return QCPolicy{VerificationTolerancePct: calib.DefaultVerificationTolerancePct}
}

// WithDefaults fills the zero fields with DefaultQCPolicy's values.
func (q QCPolicy) WithDefaults() QCPolicy {
	if q.VerificationTolerancePct == 0 {
		q.VerificationTolerancePct = calib.DefaultVerificationTolerancePct
	}
	return q
}

// Check refuses a policy outside its bounds, naming the field.
func (q QCPolicy) Check() error {
	if !calib.Finite(q.VerificationTolerancePct) || q.VerificationTolerancePct <= 0 || q.VerificationTolerancePct > 100 {
		return FieldError("/acceptance/verification_tolerance_pct", "must be a number in (0, 100]")
	}
	if !calib.Finite(q.MaxCurveAgeHours) || q.MaxCurveAgeHours < 0 || q.MaxCurveAgeHours > 24*366*10 {
		return FieldError("/max_curve_age_hours", "must be a number of hours in (0, 87840], or absent for no limit")
	}
	switch q.Signatures {
	case "", SignaturesApproval, SignaturesReviewAndApproval:
	default:
		return FieldError("/signatures", "must be %q or %q, or absent", SignaturesApproval, SignaturesReviewAndApproval)
	}
	return nil
}

// Equal reports whether two policies hold the same settings.
func (q QCPolicy) Equal(o QCPolicy) bool {
	return q.VerificationTolerancePct == o.VerificationTolerancePct &&
		q.PendingCurvesInForce == o.PendingCurvesInForce && q.MaxCurveAgeHours == o.MaxCurveAgeHours &&
		q.AllowSelfReview == o.AllowSelfReview && q.Signatures == o.Signatures
}

// MaxAge returns the maximum age of a curve in force, 0 for none.
func (q QCPolicy) MaxAge() time.Duration {
	if q.MaxCurveAgeHours <= 0 {
		return 0
	}
	return time.Duration(math.Round(q.MaxCurveAgeHours * float64(time.Hour)))
}
