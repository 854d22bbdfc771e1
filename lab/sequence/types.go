// Package sequence evaluates an analytical sequence (a batch of injections
// in acquisition order): which samples are bracketed by passing calibration
// verifications, which are withheld and why, whether the checks came often
// enough, whether the blank after the highest standard shows carry-over, and
// what blank correction applies.
//
// It is pure: injections in, an Evaluation out, no clock, no HTTP, no SQL.
// Every default below is a default only: the laboratory's accreditation,
// its regulator and its method SOP come first, and a qualified person
// reviews every result before release (see Evaluation.Cautions).
package sequence

import (
	"fmt"
	"time"

	"curvekeeper/calib"
)

// Kind is the role of an injection in the sequence.
type Kind string

// The kinds of injection.
const (
	CalibrationStandard Kind = "calibration_standard"
	ICV                 Kind = "icv"               // initial calibration verification
	CCV                 Kind = "ccv"               // continuing calibration verification
	CCB                 Kind = "ccb"               // continuing calibration blank
	CalibrationBlank    Kind = "calibration_blank" // blank of the calibration (also the carry-over blank)
	MethodBlank         Kind = "method_blank"      // blank carried through the preparation
	Sample              Kind = "sample"
	QCSample            Kind = "qc_sample" // spiked sample, duplicate, reference material
)

// Judgement is a check's verdict reached elsewhere (an instrument's own
// software, an analyst), or empty to judge the numbers here.
type Judgement string

// The judgements.
const (
	Unjudged Judgement = ""
	Pass     Judgement = "pass"
	Fail     Judgement = "fail"
)

// Injection is one injection of the sequence.
type Injection struct {
	ID       string
	Kind     Kind
	Position int       // acquisition order, ≥ 1 and unique
	Time     time.Time // acquisition time; zero when unknown (time rules then skip it)

	// Judged, when set, is the verdict of an ICV, CCV or blank; Reason
	// gives its grounds in words. Unset, the numbers below are judged.
	Judged Judgement
	Reason string

	Nominal float64 // ICV/CCV and calibration standards: nominal concentration
	Found   float64 // ICV/CCV: concentration read back from the curve
	Result  float64 // blanks and samples: concentration found

	Response   float64 // analyte response (standards, carry-over blank)
	ISResponse float64 // internal-standard response; 0 when the method has none
}

// Window is an accepted recovery range in percent, ends included.
type Window struct {
	LowPct  float64
	HighPct float64
}

func (w Window) String() string { return fmt.Sprintf("%g–%g %%", w.LowPct, w.HighPct) }

// BlankSubtraction is the blank-correction policy of a method.
type BlankSubtraction string

// The blank-correction policies.
const (
	SubtractNone            BlankSubtraction = "none"
	SubtractMeanMethodBlank BlankSubtraction = "mean_method_blank" // the mean result of the batch's method blanks
)

// Defaults. Each is configurable per method.
const (
	// DefaultVerificationLowPct and DefaultVerificationHighPct: ICV/CCV
	// recovery 90–110 %, common practice for EPA 200.8-type ICP-MS methods
	// (from memory, confirm against the method).
	DefaultVerificationLowPct  = 90
	DefaultVerificationHighPct = 110
	// DefaultMaxSamplesBetweenChecks: a CCV every 10 samples and at the end
	// is usual for EPA 200.8-type methods (FIELD-NOTES §8 [S]).
	DefaultMaxSamplesBetweenChecks = 10
	// DefaultCarryOverAnalytePct and DefaultCarryOverISPct: the blank after
	// the highest standard may show at most 20 % of the LLOQ's analyte
	// response and 5 % of the IS response (ICH M10 §3.2.6).
	DefaultCarryOverAnalytePct = 20
	DefaultCarryOverISPct      = 5
)

// Config is a method's sequence rules. Zero values take the defaults.
type Config struct {
	Verification Window // ICV and CCV recovery; zero: 90–110 %

	// The blank limit (CCB, calibration and method blanks: |result| ≤
	// limit): BlankFractionOfLLOQ·LLOQ when the fraction is > 0, else
	// ReportingLimit. Needed only when a blank is to be judged here.
	ReportingLimit      float64
	LLOQ                float64
	BlankFractionOfLLOQ float64

	// MaxSamplesBetweenChecks: at most this many samples (and QC samples)
	// between two verifications; 0: 10; negative: no count rule.
	MaxSamplesBetweenChecks int
	// MaxTimeBetweenChecks: at most this long between two verifications (or
	// the calibration and the first one); 0: no time rule.
	MaxTimeBetweenChecks time.Duration
	// ClosingCheckOptional: a complete sequence need not end with a
	// verification after its last sample (by default it must).
	ClosingCheckOptional bool

	CarryOverAnalytePct float64 // of the LLOQ response; 0: 20
	CarryOverISPct      float64 // of the IS response; 0: 5
	// LLOQResponse: the analyte response at the LLOQ; 0: the mean response
	// of the lowest non-zero calibration standard.
	LLOQResponse float64
	// ISReference: the IS response the carry-over blank is compared with;
	// 0: the mean IS response of the calibration standards.
	ISReference float64

	BlankSubtraction BlankSubtraction // "": none

	// ISWindow is the accepted IS recovery of a sample against the mean IS
	// response of the calibration standards; zero: 60–125 % (common ICP-MS
	// practice, from memory; calib.ISRecovery). Checked only when the
	// standards carry IS responses.
	ISWindow calib.ISWindow
}

// Sequence is the input: the injections and whether the sequence is
// finished (no injection will follow).
type Sequence struct {
	Injections []Injection
	Complete   bool
}

// State is a sample's release state within its sequence.
type State string

// The states.
const (
	// Provisional: no passing verification has closed the sample's bracket
	// yet; the sequence continues.
	Provisional State = "provisional"
	// Withheld: a verification or blank after the sample failed, none opened
	// its bracket, or the sequence ended without closing it.
	Withheld State = "withheld"
	// Reportable: bracketed by passing verifications. Reportable within the
	// sequence; release still needs review by a qualified person.
	Reportable State = "reportable"
)

// SampleResult is one sample's outcome.
type SampleResult struct {
	ID       string
	Position int
	Kind     Kind
	State    State
	Reason   string // in words
	Opening  int    // position of the verification opening the bracket; 0 if none
	Closing  int    // position of the verification closing it; 0 if none yet
	Result   float64
	Blank    float64 // subtracted blank; 0 under SubtractNone
	Net      float64 // Result − Blank
	// IS is the internal-standard recovery check, when the standards and
	// the sample carry IS responses (HasIS).
	IS    calib.ISCheck
	HasIS bool
	Notes []string
}

// CheckResult is the verdict of one ICV, CCV or blank.
type CheckResult struct {
	ID          string
	Position    int
	Kind        Kind
	Passed      bool
	RecoveryPct float64 // ICV/CCV judged here: 100·found/nominal
	Value       float64 // blanks: the result judged
	Limit       float64 // blanks: the limit applied
	Detail      string
}

// The frequency rules a Breach names.
const (
	RuleSamplesBetweenChecks = "samples_between_checks"
	RuleTimeBetweenChecks    = "time_between_checks"
	RuleClosingCheckMissing  = "closing_check_missing"
)

// Breach is a frequency rule the sequence broke.
type Breach struct {
	Rule     string
	Position int // where it was found
	Detail   string
}

// CarryOver is the check of the blank injected after the highest standard.
type CarryOver struct {
	Evaluated       bool
	HighestStandard int // position
	BlankPosition   int
	AnalyteResponse float64
	AnalyteLimit    float64 // CarryOverAnalytePct % of the LLOQ response
	AnalytePct      float64 // of the LLOQ response
	AnalytePassed   bool
	ISEvaluated     bool // false when the method has no internal standard
	ISResponse      float64
	ISLimit         float64 // CarryOverISPct % of the IS reference
	ISPct           float64
	ISPassed        bool
	Passed          bool
	Detail          string
	Source          string
}

// BlankCorrection states the blank-subtraction policy applied.
type BlankCorrection struct {
	Policy    BlankSubtraction
	Value     float64 // subtracted from every sample result
	Blanks    int     // method blanks averaged
	Applied   bool
	Statement string
}

// Evaluation is the outcome of a sequence.
type Evaluation struct {
	Samples   []SampleResult // samples and QC samples, in position order
	Checks    []CheckResult  // every ICV, CCV and blank, in position order
	Breaches  []Breach
	CarryOver CarryOver
	Blank     BlankCorrection
	Sources   []string
	Cautions  []string
}

// Error reports input that cannot be evaluated; Field names it.
type Error struct {
	Field  string
	Reason string
}

func (e *Error) Error() string { return "sequence: " + e.Field + ": " + e.Reason }

func inputErr(field, format string, args ...any) error {
	return &Error{Field: field, Reason: fmt.Sprintf(format, args...)}
}
