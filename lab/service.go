// Package lab holds the laboratory's rules: a run against its method,
// ingest (validate, fit each analyte, judge drift, decide release),
// predictions, exclusions, verifications, release states, trends and
// review; the error kinds; the scopes and the caller. It imports calib and
// no HTTP or SQL package: the store implements the persistence interfaces
// declared here, where they are used, and the api translates HTTP into calls
// of Service.
//
// Every fit and reported value is an aid: local accreditation, regulation
// and the laboratory's SOP come first, and a qualified person reviews the
// results.
package lab

import (
	"context"
	"slices"
	"strings"
	"time"
)

// Reader is what the lab reads as stored, with no rule to apply on the
// way: a Service hands these reads straight through.
type Reader interface {
	GetRun(ctx context.Context, id string) (*Run, error)
	GetCurve(ctx context.Context, id string) (*Curve, error)
	CurveStatus(ctx context.Context, id string) (string, error)
	ListCurves(ctx context.Context, f CurveFilter) (*CurvePage, error)
	ListAudit(ctx context.Context, curveID string) ([]AuditEvent, error)
	// SearchAudit returns audit rows by person and record, newest first.
	SearchAudit(ctx context.Context, f AuditFilter) ([]AuditEvent, error)
	GetMethod(ctx context.Context, name string) (*Method, error)
	GetMethodRevision(ctx context.Context, name string, rev int) (*Method, error)
	ListMethods(ctx context.Context) ([]Method, error)
	ListVerifications(ctx context.Context, curveID string) ([]Verification, error)
	// ReadTopDownHistory reads the verifications of q's method and analyte
	// on current curves (neither rejected nor superseded) measured in
	// [q.From, q.To), by time.
	ReadTopDownHistory(ctx context.Context, q TopDownQuery) (*TopDownHistory, error)
	GetExclusion(ctx context.Context, id string) (*Exclusion, error)
	CurveInForce(ctx context.Context, instrument, analyte string, at time.Time) (*InForce, error)
	RunResults(ctx context.Context, runID string) ([]Result, error)
	SampleResults(ctx context.Context, sampleID string) ([]Result, error)
	// GetResult returns one result as it stands now (KindNotFound with the
	// path parameter result_id when there is none).
	GetResult(ctx context.Context, id int64) (*Result, error)
	ResultFeed(ctx context.Context, since string, limit int) (*FeedPage, error)
	TrendSeries(ctx context.Context, f TrendFilter) (curves []CurveSummary, truncated bool, err error)
	TrendSubjects(ctx context.Context) ([]TrendSubject, error)
	// LookupToken returns the caller a live token's secret names
	// (KindNotFound for an unknown or revoked one).
	LookupToken(ctx context.Context, secret string) (Principal, error)
	// LookupTokenAndCurveStatus is LookupToken and CurveStatus in one
	// round trip; the status is "" when curveID names no curve.
	LookupTokenAndCurveStatus(ctx context.Context, secret, curveID string) (Principal, string, error)
	LookupSession(ctx context.Context, secret string) (Session, error)
	InstrumentOf
	Ping(ctx context.Context) error
	CheckSchema(ctx context.Context) error
	RunWriteStats() RunWriteStats
	GetMaterial(ctx context.Context, code string) (*Material, error)
	ListMaterials(ctx context.Context) ([]Material, error)
}

// Writer is what the lab writes; each write is one transaction with its
// audit row, and the Service's methods apply the rules around it.
type Writer interface {
	RunStore
	Unit
	MaterialStore
	CreateMethod(ctx context.Context, in MethodInput, actor string) (m *Method, created bool, err error)
	// IssueToken stores a token checked by CheckTokenInput.
	IssueToken(ctx context.Context, in TokenInput, actor string) (id, secret string, err error)
	RevokeToken(ctx context.Context, id, actor string) error
	ReviewCurve(ctx context.Context, id, decision, reason, actor string) (*Review, error)
	CreateVerification(ctx context.Context, in VerificationInput) (*Verification, error)
	CreateRevision(ctx context.Context, in RevisionInput) (string, error)
	// AddSamples stores samples posted after their run with their results;
	// budgets holds each analyte's budget context (absent: no budget).
	AddSamples(ctx context.Context, runID string, samples []Sample, budgets map[string]BudgetContext, actor string) ([]Result, error)
	CreateSession(ctx context.Context, tokenSecret string, ttl time.Duration) (string, Principal, error)
	DeleteSession(ctx context.Context, secret string) error
}

// Store is every persistence the lab's rules need, and the database's
// replication as the api sees it.
type Store interface {
	Reader
	Writer
	PeopleStore
	Topology
}

// Service applies the lab's rules over a store. Its reads are the
// Reader's; its writes are its own methods.
type Service struct {
	Reader
	store  Writer
	people PeopleStore
	topo   Topology
	now    func() time.Time // the receipt clock (WithClock)
	skew   time.Duration    // how far ahead of receipt a claimed time may lie
	// People is the lab's setting for accounts and signatures.
	People PeopleConfig
}

// NewService returns the rules over st.
func NewService(st Store, opts ...Option) *Service {
	s := &Service{Reader: st, store: st, people: st, topo: st, now: time.Now, skew: DefaultFutureSkew}
	for _, o := range opts {
		o(s)
	}
	return s
}

// ReadingFrom returns the same rules with their stored reads (Reader, and
// the Service's reads built on it: Trend, SearchAudit) taken from r, a read
// replica for reads that tolerate its lag (Topology.ReadsFor). Writes,
// token and session checks, people and signatures stay on s's store.
func (s *Service) ReadingFrom(r Reader) *Service {
	c := *s
	c.Reader = r
	return &c
}

// Topology returns the database's replication, for the api.
func (s *Service) Topology() Topology { return s.topo }

// DefineMethod stores a method definition as its next revision (see
// Writer.CreateMethod), on behalf of p.
func (s *Service) DefineMethod(ctx context.Context, p Principal, in MethodInput) (*Method, bool, error) {
	return s.store.CreateMethod(ctx, in, p.Actor())
}

// IssueToken issues a token on behalf of p and returns its id and its
// secret, shown only here. The rules are CheckTokenInput's (a runs:write
// token is bound to instruments; runs:write with curves:review needs the
// administrator's explicit choice); the token belongs to in.Owner, or to
// DefaultOwner's choice, and a disabled person may not own a new one.
func (s *Service) IssueToken(ctx context.Context, p Principal, in TokenInput) (id, secret string, err error) {
	in, err = CheckTokenInput(in)
	if err != nil {
		return "", "", err
	}
	if in.Owner == "" {
		in.Owner = DefaultOwner(p, in.Name, in.Scopes)
	} else if err := CheckOwner(in.Owner); err != nil {
		return "", "", err
	}
	if login, ok := strings.CutPrefix(in.Owner, OwnerPerson); ok {
		person, err := s.people.GetPerson(ctx, login)
		if err != nil {
			return "", "", err
		}
		if person.DisabledAt != nil {
			return "", "", FieldError("/owner", "%s is disabled", login)
		}
	}
	return s.store.IssueToken(ctx, in, p.Actor())
}

// RevokeToken revokes token id on behalf of p.
func (s *Service) RevokeToken(ctx context.Context, p Principal, id string) error {
	return s.store.RevokeToken(ctx, id, p.Actor())
}

// Review approves or rejects curve id, once, on behalf of p. A curve that
// failed its checks can be approved only with a reason; its results move
// with the review (release states).
//
// The store applies CheckReview with the curve locked: a superseded curve
// is not reviewed, and the principal that posted the run or made the
// revision does not review it unless the method allows it.
func (s *Service) Review(ctx context.Context, p Principal, id, decision, reason string) (*Review, error) {
	if err := CheckFreeText("/reason", reason); err != nil {
		return nil, err
	}
	if p.IsPerson() {
		return nil, FieldError("/decision", "a person signed in with login and password approves or rejects by signing (meaning approval), not by an unsigned review")
	}
	if s.People.RequireSignedApproval {
		return nil, FieldError("/decision", "%s (the lab requires signed approval on every method)", RuleSignedApproval)
	}
	return s.store.ReviewCurve(ctx, id, decision, reason, p.Actor())
}

// Verify records a verification standard against a curve on behalf of p;
// the rules (the curve is current, fitted, not rejected, and the standard
// measured after it) are checked with the curve locked. A named reference
// material is checked first (CheckVerificationMaterial): materials and a
// curve's analyte never change, so no lock is needed for it.
func (s *Service) Verify(ctx context.Context, p Principal, in VerificationInput) (*Verification, error) {
	if err := s.checkClaimed(InBody, "/acquired_at", in.At, s.now()); err != nil {
		return nil, err
	}
	if in.Material != "" {
		if err := s.checkVerificationMaterial(ctx, in); err != nil {
			return nil, err
		}
	}
	in.Actor = p.Actor()
	return s.store.CreateVerification(ctx, in)
}

// AddSamples quantifies samples posted after their run against its curves
// on behalf of p.
func (s *Service) AddSamples(ctx context.Context, p Principal, runID string, samples []Sample) ([]Result, error) {
	run, m, err := s.refuseLateISSamples(ctx, runID, samples)
	if err != nil {
		return nil, err
	}
	budgets, err := s.runBudgetContexts(ctx, m, run, samples)
	if err != nil {
		return nil, err
	}
	received := s.now().UTC()
	samples = slices.Clone(samples)
	for i, sm := range samples {
		if sm.AcquiredAt == nil { // acquired when received
			samples[i].AcquiredAt = &received
			continue
		}
		if err := s.checkClaimed(InBody, Pointer("samples", i, "acquired_at"), *sm.AcquiredAt, received); err != nil {
			return nil, err
		}
	}
	return s.store.AddSamples(ctx, runID, samples, budgets, p.Actor())
}

// SignIn exchanges a token's secret for a session of the QA pages.
func (s *Service) SignIn(ctx context.Context, tokenSecret string, ttl time.Duration) (string, Principal, error) {
	return s.store.CreateSession(ctx, tokenSecret, ttl)
}

// SignInPerson opens a session of the QA pages for the person whose login
// and password c gives (the lockout counts a wrong password), of the lab's
// configured session length.
func (s *Service) SignInPerson(ctx context.Context, c Credentials) (string, *Person, error) {
	person, err := s.Authenticate(ctx, c)
	if err != nil {
		return "", nil, err
	}
	secret, err := s.people.CreatePersonSession(ctx, person, s.People.Session())
	if err != nil {
		return "", nil, err
	}
	return secret, person, nil
}

// SignOut ends a session of the QA pages.
func (s *Service) SignOut(ctx context.Context, secret string) error {
	return s.store.DeleteSession(ctx, secret)
}
