package lab

import (
	"fmt"
	"slices"
	"strings"
	"time"

	"curvekeeper/calib"
)

// Standard is one calibration standard of a run: every response is one
// replicate reading, in the order measured.
type Standard struct {
	Analyte       string    `json:"analyte"`
	Level         string    `json:"level"`
	Concentration float64   `json:"concentration"`
	Responses     []float64 `json:"responses"`
	// ISResponses holds the internal standard's response of each reading,
	// when the analyte's method names one (lab/quant.go).
	ISResponses []float64 `json:"is_responses,omitempty"`
}

// Sample is one unknown posted with a run.
type Sample struct {
	ID        string    `json:"id"`
	Analyte   string    `json:"analyte"`
	Responses []float64 `json:"responses"`
	Dilution  float64   `json:"dilution"` // 0 in RunInput means 1
	// AcquiredAt is when a sample posted after its run was acquired; nil for
	// a sample posted with its run, which was acquired with it.
	AcquiredAt *time.Time `json:"acquired_at,omitempty"`
	// ISResponses holds the internal standard's response of each reading,
	// when the analyte's method names one.
	ISResponses []float64 `json:"is_responses,omitempty"`
	// Prep is the sample's preparation for its reported value.
	Prep Prep `json:"prep,omitzero"`
}

// RunInput is a run as received (whatever its format) and, once Ingest has
// checked it against its method, as stored.
type RunInput struct {
	Method         string
	MethodRevision int // the revision the curves were fitted with
	Instrument     string
	AcquiredAt     time.Time
	Operator       string // "" when not given
	SourceFormat   string // FormatJSON or FormatCSV
	// RequestHash identifies the request body for idempotent replay (the
	// api's choice of hash, e.g. SHA-256 of the body and content type).
	RequestHash []byte
	// IdempotencyKey is the client's Idempotency-Key, "" when absent. Keys
	// are scoped to TokenID.
	IdempotencyKey string
	TokenID        string
	Actor          string // who posted it, for the audit trail
	// CheckAnswer, when set, is given the run's answer once its ids are
	// drawn and before any of its rows is written: an error (the api could
	// not encode the answer) stores nothing.
	CheckAnswer func(*RunCreated) error
	Standards   []Standard
	Samples     []Sample
	// Materials names the standard materials (codes) the run's standards
	// were made from; see addStandardsChecks.
	Materials []string
	// Sequence is the run's injection order, nil when it was not given.
	Sequence *RunSequence
}

// CurveInput is one fitted curve of a run, fitted by Ingest before
// CreateRun (with calib.Fit, or calib.FailedReport when it could not be
// fitted). Model, weighting, verdict and engine version are taken from Report.
type CurveInput struct {
	Analyte string
	Unit    string
	Report  *calib.Report
	// Rules is the method's analyte (its internal standard and reporting
	// rules); CalibratorIS the IS responses of its standards; Highest its
	// highest standard's concentration.
	Rules        Analyte
	CalibratorIS []float64
	Highest      float64
	// Standards is the standards' term of the uncertainty budget, from the
	// standard materials the run named for the analyte; nil when none.
	Standards *StandardsTerm
	// History and HistoryGap are the top-down estimate from the QC history
	// (or why there is none) when the analyte's spec asks for it.
	History    *TopDownEstimate
	HistoryGap string
}

// RunCreated is what CreateRun stored; it is also the response body kept for
// idempotent replay, so its JSON is the api's 201 body.
type RunCreated struct {
	ID     string         `json:"id"`
	Curves []CreatedCurve `json:"curves"`
	// Replayed is true when the run was stored by an earlier request with
	// the same idempotency key and body, and nothing was written now.
	Replayed bool `json:"-"`
}

// CreatedCurve names one curve of a created run.
type CreatedCurve struct {
	ID      string `json:"id"`
	Analyte string `json:"analyte"`
	Verdict string `json:"verdict"`
}

// CheckRun refuses input the schema would refuse, naming the field, before
// anything is sent to the database.
func CheckRun(in *RunInput, curves []CurveInput) error {
	switch {
	case strings.TrimSpace(in.Method) == "":
		return FieldError("/method", "method is required")
	case in.MethodRevision < 1:
		return Errorf(KindInvalid, "method revision is required")
	case strings.TrimSpace(in.Instrument) == "" || len(in.Instrument) > MaxNameLen:
		return FieldError("/instrument", "instrument must be 1 to %d characters", MaxNameLen)
	case in.AcquiredAt.Before(MinTimestamp) || in.AcquiredAt.After(MaxTimestamp):
		return CheckTimestamp(InBody, "/acquired_at", in.AcquiredAt)
	case in.SourceFormat != FormatJSON && in.SourceFormat != FormatCSV:
		return Errorf(KindInvalid, "unknown source format %q", in.SourceFormat)
	case len(in.RequestHash) == 0:
		return Errorf(KindInvalid, "request hash is required")
	case strings.TrimSpace(in.Actor) == "":
		return Errorf(KindInvalid, "actor is required")
	case len(in.Standards) == 0:
		return FieldError("/standards", "at least one standard is required")
	}
	if in.IdempotencyKey != "" {
		if len(in.IdempotencyKey) > MaxIdempotencyKeyLen {
			return ParamError(KindInvalid, InHeader, "Idempotency-Key", "Idempotency-Key must be at most %d characters", MaxIdempotencyKeyLen)
		}
		if in.TokenID == "" {
			return Errorf(KindInvalid, "an Idempotency-Key needs the token id it is scoped to")
		}
	}
	seen := levels{}
	for i, s := range in.Standards {
		p := fmt.Sprintf("/standards/%d", i)
		switch {
		case strings.TrimSpace(s.Analyte) == "":
			return FieldError(p+"/analyte", "analyte is required")
		case strings.TrimSpace(s.Level) == "":
			return FieldError(p+"/level", "level is required")
		case !calib.Finite(s.Concentration) || s.Concentration < 0:
			return FieldError(p+"/concentration", "concentration must be a finite number >= 0")
		case len(s.Responses) == 0:
			return FieldError(p+"/responses", "at least one response is required")
		}
		if err := seen.add(i, s); err != nil {
			return err
		}
		for k, r := range s.Responses {
			if !calib.Finite(r) {
				return FieldError(fmt.Sprintf("%s/responses/%d", p, k), "response must be a finite number")
			}
		}
	}
	if err := checkMaterialCodes(in.Materials); err != nil {
		return err
	}
	in.Samples = slices.Clone(in.Samples) // the dilution default must not write into the caller's slice
	for i := range in.Samples {
		if err := CheckSample(&in.Samples[i], fmt.Sprintf("/samples/%d", i)); err != nil {
			return err
		}
	}
	analytes := map[string]bool{}
	for i, c := range curves {
		if c.Report == nil {
			return fmt.Errorf("store: curve %d (%s) has no report", i, c.Analyte)
		}
		if analytes[c.Analyte] {
			return fmt.Errorf("store: two curves for analyte %q", c.Analyte)
		}
		analytes[c.Analyte] = true
	}
	return nil
}

// Run is a stored run: its readings grouped back into standards in the order
// received (responses in replicate order), its samples and its curves.
type Run struct {
	ID             string
	Method         string
	MethodRevision int
	Instrument     string
	AcquiredAt     time.Time
	Operator       string
	ReceivedAt     time.Time
	ReceivedBy     string
	SourceFormat   string
	Standards      []Standard
	Samples        []Sample
	Curves         []CurveRef
	Materials      []string // the standard materials the run named
	// Sequence is the run's injection order as posted; nil without one.
	Sequence *RunSequence
}

// CurveRef names one curve of a run.
type CurveRef struct {
	ID         string
	Analyte    string
	Verdict    string
	Status     string
	RevisionOf string // "" for the run's own fit
}

// RunReadsQuery names what ingesting a run reads before its transaction
// opens: the stored response of its idempotency key (when it carries one),
// the latest revision of its method and the drift history of each of its
// analytes on its instrument.
type RunReadsQuery struct {
	TokenID     string
	Key         string // "" reads no idempotency key
	RequestHash []byte
	Method      string
	Instrument  string
	Analytes    []string
	Before      time.Time
	Limit       int // slopes per analyte, as RecentApprovedSlopes
}

// RunReads is the answer to a RunReadsQuery.
type RunReads struct {
	// Replay is the stored response when the key was used before with the
	// same request hash; the other fields are then not filled in.
	Replay *RunCreated
	Method *Method
	// Slopes holds, per analyte, what RecentApprovedSlopes would return.
	Slopes map[string][]float64
}

// CheckSample refuses a sample the schema would refuse; p is its pointer.
func CheckSample(s *Sample, p string) error {
	if s.Dilution == 0 {
		s.Dilution = 1
	}
	switch {
	case strings.TrimSpace(s.ID) == "" || len(s.ID) > MaxNameLen:
		return FieldError(p+"/id", "sample id must be 1 to %d characters", MaxNameLen)
	case strings.TrimSpace(s.Analyte) == "":
		return FieldError(p+"/analyte", "analyte is required")
	case len(s.Responses) == 0:
		return FieldError(p+"/responses", "at least one response is required")
	case !calib.Finite(s.Dilution) || s.Dilution <= 0:
		return FieldError(p+"/dilution", "dilution must be a finite number > 0")
	}
	for k, r := range s.Responses {
		if !calib.Finite(r) {
			return FieldError(fmt.Sprintf("%s/responses/%d", p, k), "response must be a finite number")
		}
	}
	return nil
}

// Source formats of a run.
const (
	FormatJSON = "json"
	FormatCSV  = "csv"
)

// Verdicts and review statuses of a curve.
const (
	VerdictPass = "pass"
	VerdictFail = "fail"

	StatusPendingReview = "pending_review"
	StatusApproved      = "approved"
	StatusRejected      = "rejected"

	DecisionApprove = "approve"
	DecisionReject  = "reject"
)

// levels holds the levels of a run seen so far, for the rule that a level
// appears once per analyte: replicates are several responses of one
// standard.
type levels map[[2]string]bool

// add records standard i, or refuses it when its level was seen before.
func (l levels) add(i int, st Standard) error {
	k := [2]string{st.Analyte, st.Level}
	if l[k] {
		return FieldError(Pointer("standards", i, "level"), "level %q of %s appears twice; send replicates as several responses of one standard", st.Level, st.Analyte)
	}
	l[k] = true
	return nil
}
