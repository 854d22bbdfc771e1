package lab

import (
	"encoding/json"
	"slices"
	"time"

	"curvekeeper/calib"
)

// AuditEvent is one row of the append-only audit trail.
type AuditEvent struct {
	ID         int64
	At         time.Time
	Actor      string
	Action     string
	EntityType string // "token", "method", "run" or "curve"
	EntityID   string
	Detail     json.RawMessage // a JSON object
}

// CurveSummary is a curve's row without its report, as history lists it.
type CurveSummary struct {
	ID             string
	RunID          string
	RevisionOf     string // "" for a run's own fit
	Method         string
	MethodRevision int
	Instrument     string
	Analyte        string
	Unit           string
	Model          calib.Model
	Weighting      calib.Weighting
	Verdict        string // VerdictPass or VerdictFail
	Status         string // StatusPendingReview, StatusApproved or StatusRejected
	EngineVersion  string
	AcquiredAt     time.Time
	CreatedAt      time.Time
	CreatedBy      string
	ReviewedAt     *time.Time
	ReviewedBy     string
	// Copies of report values for trends; nil when not computed.
	Slope, Intercept, ResidualSD, RSquared, LOD *float64
	// Coefficients of a converged non-linear curve in its model's order
	// (calib.ParameterNames), read for trends only; nil otherwise.
	Coefficients []float64
	ISResponse   *float64 // mean IS response of the calibrators; nil without an IS
	// FailedChecks names the checks that did not pass, mandatory or advisory.
	FailedChecks []string
}

// Curve is a stored curve with its report and, once reviewed, its review.
type Curve struct {
	CurveSummary
	Report *calib.Report
	Review *Review // nil while pending review
}

// Review is the one review a curve can have.
type Review struct {
	CurveID  string
	Decision string // DecisionApprove or DecisionReject
	Reason   string
	Actor    string
	At       time.Time
}

// CurveFilter selects curves for ListCurves. Empty fields do not filter.
type CurveFilter struct {
	Instrument string
	Analyte    string
	Method     string
	Status     string
	Verdict    string
	From       time.Time // acquired_at >= From
	To         time.Time // acquired_at < To
	Limit      int       // 0 means DefaultCurveLimit; at most MaxCurveLimit
	Cursor     string    // NextCursor of the previous page; "" for the first
}

// CurvePage is one page of history.
type CurvePage struct {
	Curves     []CurveSummary
	NextCursor string // "" on the last page
}

// RevisionInput is an exclusion revision of a curve, planned and refitted by
// the caller (PlanExclusion, then calib.Fit with the original's method
// revision) before the transaction opens: the original's readings are
// immutable, so the refit stays valid.
type RevisionInput struct {
	OriginalID  string
	Report      *calib.Report   // the refit, with the excluded readings marked
	Excluded    []ExcludedPoint // every reading the revision excludes
	Reason      string
	RangeReason string // "" when none was given
	Actor       string
	// Budget is the budget context of the curve's analyte (the original's
	// method revision and run): the revision's results carry budgets.
	Budget BudgetContext
}

// Exclusion records why a revision left readings out.
type Exclusion struct {
	CurveID     string // the revision
	RevisionOf  string // the original
	Points      []ExcludedPoint
	Reason      string
	RangeReason string
	Actor       string
	At          time.Time
}

// InForce is the curve that applied to an instrument and analyte at a moment.
type InForce struct {
	Curve     CurveSummary
	Basis     string     // why this curve, in words
	ExpiresAt *time.Time // nil when the method sets no maximum age
	// LastVerification is the latest verification of the curve at or before
	// the moment; nil when none.
	LastVerification *Verification
}

// ResultEvent is one entry of the change feed: a result was created or its
// release state changed.
type ResultEvent struct {
	Seq           int64
	At            time.Time
	Kind          string
	Cause         string
	State         string
	Previous      string // "" for EventCreated
	Reason        string
	ResultID      int64
	SampleID      string
	RunID         string
	CurveID       string
	Analyte       string
	Unit          string
	Concentration *float64

	// What a LIMS needs to act on the event, from the result (which never
	// changes but for its release state).
	AcquiredAt      time.Time
	Dilution        float64
	StandardError   *float64
	IntervalLow     *float64
	IntervalHigh    *float64
	IntervalLevel   float64
	IntervalBounded bool
	IntervalMethod  string
	Flags           []string
	Reported        []byte // the reported value's JSON; nil where the method reports none
	Uncertainty     []byte // the budget's JSON (BudgetRecord); nil where the method asks for none
}

// FeedPage is one page of the change feed.
type FeedPage struct {
	Events []ResultEvent
	// NextCursor is where the next page starts: after the last event of this
	// page, or the cursor asked for when the page is empty. Never "".
	NextCursor string
	More       bool // more events were committed after this page
}

// Result is a sample quantified against a curve at write time. Its numbers
// never change; ReleaseState and ReleaseReason follow the curve and its QC.
type Result struct {
	ID              int64
	CurveID         string
	RunID           string
	SampleID        string
	Analyte         string
	Unit            string // the analyte's UCUM code
	AcquiredAt      time.Time
	Responses       []float64
	Dilution        float64 // applied after inversion
	MeanResponse    float64
	Concentration   *float64 // after dilution; nil when the curve gave none
	StandardError   *float64
	IntervalLow     *float64 // nil when the interval is unbounded
	IntervalHigh    *float64
	IntervalLevel   float64
	IntervalBounded bool
	IntervalMethod  string
	Flags           []string
	ReleaseState    string
	ReleaseReason   string
	StateChangedAt  time.Time
	CreatedAt       time.Time
	CreatedBy       string
	// Reported and ISCheck are the JSON of ReportedValue and ISRecord; nil
	// when the analyte has no reporting rules or internal standard.
	Reported, ISCheck []byte
	Sequence          []byte // SequenceRecord JSON; nil without a sequence
	// Uncertainty is the JSON of the result's BudgetRecord; nil when its
	// method asks for no budget.
	Uncertainty []byte
}

// RunWriteStats counts CreateRun's writes since the service started: the
// groups written, the runs they held, and the runs written alone after their
// group failed (an idempotency key used before, a refused run in the group).
type RunWriteStats struct{ Groups, Grouped, Alone int64 }

// Session is a signed-in browser session of the QA pages: the token it was
// opened with, or the person (scopes read afresh), and when it ends.
type Session struct {
	// Token is the session's principal: the token it was opened with, or
	// the person who signed in with login and password (TokenID "", Owner
	// "person:<login>", the scopes of the person's roles).
	Token       Principal
	PrintedName string // the person's full name; "" for a token's session
	ExpiresAt   time.Time
}

// TrendFilter selects the curves of one instrument and analyte for a trend.
type TrendFilter struct {
	Instrument string
	Analyte    string
	From       time.Time // acquired_at >= From; zero for no bound
	To         time.Time // acquired_at < To; zero for no bound
}

// ParamValue returns the value of parameter p of c, false when it was not
// computed (a failed fit, no intercept in the origin model, no LOD).
func (c *CurveSummary) ParamValue(p string) (float64, bool) {
	var v *float64
	switch p {
	case ParamSlope:
		v = c.Slope
	case ParamIntercept:
		v = c.Intercept
	case ParamResidualSD:
		v = c.ResidualSD
	case ParamRSquared:
		v = c.RSquared
	case ParamLOD:
		v = c.LOD
	case ParamISResponse:
		v = c.ISResponse
	}
	if i := slices.Index(calib.ParameterNames(c.Model), p); v == nil && i >= 0 && i < len(c.Coefficients) {
		v = &c.Coefficients[i]
	}
	if v == nil {
		return 0, false
	}
	return *v, true
}

// TrendSubject is one instrument and analyte that has curves.
type TrendSubject struct {
	Instrument string
	Analyte    string
	Curves     int  // how many, up to MaxTrendPoints
	More       bool // more than Curves (and than one trend reads)
	Last       time.Time
}

// VerificationInput is a verification standard measured against a curve.
type VerificationInput struct {
	CurveID       string
	Kind          string // VerificationInitial or VerificationContinuing
	Level         string
	Concentration float64 // nominal, > 0
	Responses     []float64
	At            time.Time // when it was measured
	Actor         string
	// Material, when set, is the reference material the standard is: a
	// MaterialReference of the curve's analyte and unit, in date at At,
	// whose certificate value Concentration equals (CheckVerificationMaterial).
	Material string
}

// Verification is a stored verification with its outcome.
type Verification struct {
	ID            string
	CurveID       string
	Kind          string
	Level         string
	Concentration float64
	Responses     []float64
	Found         *float64 // nil when the curve has no root for the response
	RecoveryPct   *float64
	DifferencePct *float64
	LimitPct      float64
	Passed        bool
	Detail        string
	At            time.Time
	CreatedAt     time.Time
	CreatedBy     string
	Material      string // the reference material measured, "" when none
	// ResultsChanged counts the results whose release state this
	// verification changed (only when just created).
	ResultsChanged int
}

// Release states of a sample result.
const (
	ReleaseProvisional = "provisional" // the curve awaits review
	ReleaseReleasable  = "releasable"  // the curve is approved and QC does not hold the result back
	ReleaseWithheld    = "withheld"    // the curve or QC holds the result back; the reason says why
)

// Verification kinds and the audit action of a verification.
const (
	VerificationInitial    = "initial"    // ICV
	VerificationContinuing = "continuing" // CCV
	ActionCurveVerify      = "curve.verification"
)

// Rules a verification request can break; each error message names its rule.
const (
	RuleCurveNotRejected = "curve_not_rejected"
	RuleCurveIsCurrent   = "curve_is_current"
	RuleCurveHasFit      = "curve_has_fit"
	RuleAfterCalibration = "verification_after_calibration"
)

// Trend parameters: the curve columns a trend can follow.
const (
	ParamSlope      = "slope"
	ParamIntercept  = "intercept"
	ParamResidualSD = "residual_sd"
	ParamRSquared   = "r_squared"
	ParamLOD        = "lod"
	// The coefficients of the non-linear models by name (calib.FourPL and
	// the others): the 4PL's a, b, c, d and the 5PL's g; power and
	// exponential curves share a and b, the offset exponential adds y0.
	ParamA  = "a"
	ParamB  = "b"
	ParamC  = "c"
	ParamD  = "d"
	ParamG  = "g"
	ParamY0 = "y0"
	// ParamISResponse is the mean internal-standard response of the
	// curve's calibrators (none without an internal standard): a falling
	// series shows the instrument losing sensitivity before the ratios do.
	ParamISResponse = "is_response"
)

// TrendParameters lists the parameters in a fixed order.
var TrendParameters = []string{ParamSlope, ParamIntercept, ParamResidualSD, ParamRSquared, ParamLOD, ParamISResponse,
	ParamA, ParamB, ParamC, ParamD, ParamG, ParamY0}

// MaxTrendPoints bounds the curves one trend reads.
const MaxTrendPoints = 1000

// Flags a stored result may carry besides calib's prediction flags.
const (
	FlagNoCurve         = "no_curve"         // the curve could not be fitted
	FlagNotQuantifiable = "not_quantifiable" // the engine refused the readings (the interval method says why)
)

// History page sizes.
const (
	DefaultCurveLimit = 50
	MaxCurveLimit     = 1000
)

// Kinds of result events.
const (
	EventCreated      = "created"
	EventStateChanged = "state_changed"
)

// Causes of result events.
const (
	CauseRunCreate    = "run.create"
	CauseSamplesAdd   = "samples.add"
	CauseReview       = "curve.review"
	CauseVerification = "curve.verification"
	CauseExclusion    = "curve.exclusion"
	// CauseWithdrawal: an approval signature was withdrawn and its curve
	// returned to review.
	CauseWithdrawal = "signature.withdraw"
)

// Feed page sizes.
const (
	DefaultFeedLimit = 100
	MaxFeedLimit     = 1000
)

// MaxPredictionSamples bounds the samples of one prediction request (the
// spec's maxItems of a prediction's samples), a batch's entries together.
const MaxPredictionSamples = 1000

// MaxSessionTTL bounds the lifetime of a session of the QA pages.
const MaxSessionTTL = 24 * time.Hour

// ActionCurveExclude is the audit action, on the original curve, of an
// exclusion revision.
const ActionCurveExclude = "curve.exclusion"
