package lab

import (
	"context"
	"crypto/sha256"
	"encoding/json"
	"fmt"
	"regexp"
	"slices"
	"strings"
	"time"
)

// The roles a person can hold (a person may hold several).
const (
	RoleAnalyst       = "analyst"       // runs the method, posts runs, excludes standards
	RoleReviewer      = "reviewer"      // checks a curve: signs its review
	RoleQAApprover    = "qa-approver"   // approves or rejects a curve, releases results
	RoleAdministrator = "administrator" // keeps people and tokens; signs nothing by this role alone
)

// Roles lists every role, in a fixed order.
var Roles = []string{RoleAnalyst, RoleReviewer, RoleQAApprover, RoleAdministrator}

// Meanings of a signature (21 CFR 11.50(a)(3)).
const (
	MeaningReview         = "review"
	MeaningApproval       = "approval"
	MeaningResponsibility = "responsibility"
)

// DefaultMaxFailedSignIns is how many wrong passwords in a row lock an
// account when PeopleConfig leaves it zero (common practice).
const DefaultMaxFailedSignIns = 5

// Owner prefixes of a token: every token belongs to a person or an
// instrument.
const (
	OwnerPerson     = "person:"
	OwnerInstrument = "instrument:"
)

// RuleSecondPerson is the rule a signature breaks when its signer posted the
// run or made the exclusion it would approve.
const RuleSecondPerson = "second-person review: the signer of a review or approval must differ from the analyst who posted the run or made the exclusion"

// Person is a user account. Its password hash never leaves the store.
type Person struct {
	ID             string
	Login          string
	FullName       string
	Roles          []string
	FailedAttempts int
	LockedAt       *time.Time
	DisabledAt     *time.Time
	DisabledBy     string
	CreatedAt      time.Time
	CreatedBy      string
}

// HasRole reports whether the person holds role.
func (p *Person) HasRole(role string) bool { return slices.Contains(p.Roles, role) }

// Owner is the token owner string of the person.
func (p *Person) Owner() string { return OwnerPerson + p.Login }

// PersonInput is a new account.
type PersonInput struct {
	Login    string
	FullName string
	Roles    []string
	Password string
}

var loginPattern = regexp.MustCompile(`^[a-z0-9][a-z0-9._-]{0,63}$`)

// Password length bounds, in bytes.
const (
	MinPasswordLen = 10
	MaxPasswordLen = 256
)

// CheckPerson validates a new account and returns its roles deduplicated in
// the order of Roles.
func CheckPerson(in PersonInput) ([]string, error) {
	if !loginPattern.MatchString(in.Login) {
		return nil, FieldError("/login", "a login is 1 to 64 characters: lower-case letters, digits, '.', '_' or '-', starting with a letter or digit")
	}
	if n := len(strings.TrimSpace(in.FullName)); n == 0 || len(in.FullName) > 200 {
		return nil, FieldError("/full_name", "the full printed name must be 1 to 200 characters")
	}
	if len(in.Password) < MinPasswordLen || len(in.Password) > MaxPasswordLen {
		return nil, FieldError("/password", "a password must be %d to %d bytes", MinPasswordLen, MaxPasswordLen)
	}
	if len(in.Roles) == 0 {
		return nil, FieldError("/roles", "at least one role is required")
	}
	for i, r := range in.Roles {
		if !slices.Contains(Roles, r) {
			return nil, FieldError(fmt.Sprintf("/roles/%d", i), "unknown role %q (one of %s)", r, strings.Join(Roles, ", "))
		}
	}
	var out []string
	for _, r := range Roles {
		if slices.Contains(in.Roles, r) {
			out = append(out, r)
		}
	}
	return out, nil
}

// CheckOwner validates a token's owner: "person:<login>" or
// "instrument:<name>".
func CheckOwner(owner string) error {
	switch {
	case strings.HasPrefix(owner, OwnerPerson) && loginPattern.MatchString(strings.TrimPrefix(owner, OwnerPerson)):
		return nil
	case strings.HasPrefix(owner, OwnerInstrument):
		n := strings.TrimPrefix(owner, OwnerInstrument)
		if strings.TrimSpace(n) != "" && len(n) <= MaxNameLen {
			return nil
		}
	}
	return FieldError("/owner", "owner must be person:<login> or instrument:<name>")
}

// DefaultOwner is the owner of a token issued without one: an instrument
// token (runs:write alone) belongs to the instrument of its name, any other
// to the person whose token issued it, or else to the issuing actor.
func DefaultOwner(issuer Principal, name string, scopes []string) string {
	if len(scopes) == 1 && scopes[0] == ScopeRunsWrite {
		return OwnerInstrument + name
	}
	if strings.HasPrefix(issuer.Owner, OwnerPerson) {
		return issuer.Owner
	}
	return issuer.Actor()
}

// PeopleConfig is the lab's setting for people and signatures.
type PeopleConfig struct {
	// MaxFailedSignIns wrong passwords in a row lock an account (0 means
	// DefaultMaxFailedSignIns).
	MaxFailedSignIns int
	// Zone is the lab's time zone, shown beside UTC on every signature
	// (nil means UTC).
	Zone *time.Location
	// SessionTTL is how long a session of the QA pages lasts, opened with
	// a token or a person's login and password (0 means
	// DefaultSessionTTL; at most MaxSessionTTL).
	SessionTTL time.Duration
	// RequireSignedApproval refuses the unsigned review route of a token
	// on every method, as if each set QCPolicy.Signatures to
	// SignaturesApproval (a method may still require review and approval).
	RequireSignedApproval bool
}

// DefaultSessionTTL is the length of a QA-page session when PeopleConfig
// leaves it zero: one working shift (common practice).
const DefaultSessionTTL = 8 * time.Hour

// Session is the configured session length.
func (c PeopleConfig) Session() time.Duration {
	if c.SessionTTL <= 0 {
		return DefaultSessionTTL
	}
	return min(c.SessionTTL, MaxSessionTTL)
}

// MaxFailures is the configured lockout threshold.
func (c PeopleConfig) MaxFailures() int {
	if c.MaxFailedSignIns <= 0 {
		return DefaultMaxFailedSignIns
	}
	return c.MaxFailedSignIns
}

// ZoneName is the lab's time zone name.
func (c PeopleConfig) ZoneName() string {
	if c.Zone == nil {
		return "UTC"
	}
	return c.Zone.String()
}

// Credentials are what a signing person gives again at each signature
// (21 CFR 11.200(a)(1): identity and password).
type Credentials struct {
	Login    string
	Password string
}

// Signature is an electronic signature on a record.
type Signature struct {
	ID          string
	RecordType  string // SubjectCurve, SubjectExclusion or SubjectRelease
	RecordID    string
	PersonID    string
	Login       string
	PrintedName string
	Meaning     string
	Decision    string // DecisionApprove or DecisionReject for a curve's approval; "" otherwise
	Reason      string
	SignedAt    time.Time
	TimeZone    string // the lab's zone at signing
	ContentHash []byte // SHA-256 of Content
	Content     json.RawMessage
	// Withdrawal, once.
	WithdrawnAt      *time.Time
	WithdrawnBy      string
	WithdrawalReason string
}

// What is the meaning of the signature as a person reads it: the meaning,
// with what was signed when it is not the curve itself.
func (s *Signature) What() string {
	switch s.RecordType {
	case SubjectExclusion:
		return s.Meaning + " for the exclusion of standards"
	case SubjectRelease:
		return s.Meaning + " for the release of results"
	}
	return s.Meaning
}

// Local is the signing time in the signature's zone (UTC when unknown).
func (s *Signature) Local() time.Time {
	loc, err := time.LoadLocation(s.TimeZone)
	if err != nil {
		loc = time.UTC
	}
	return s.SignedAt.In(loc)
}

// Manifestation is the human-readable line of a signature (21 CFR 11.50):
// printed name, date and time in UTC and the lab's zone, and meaning.
func (s *Signature) Manifestation() string {
	line := fmt.Sprintf("%s — %s — %s UTC (%s)", s.PrintedName, s.What(),
		s.SignedAt.UTC().Format("2006-01-02 15:04:05"), s.Local().Format("2006-01-02 15:04:05 MST"))
	if s.WithdrawnAt != nil {
		line += fmt.Sprintf(" — withdrawn %s UTC: %s", s.WithdrawnAt.UTC().Format("2006-01-02 15:04:05"), s.WithdrawalReason)
	}
	return line
}

// SignatureInput is a signature ready to store: the person authenticated,
// the rules checked, the content hashed.
type SignatureInput struct {
	RecordType  string
	RecordID    string
	Person      *Person
	Meaning     string
	Decision    string
	Reason      string
	TimeZone    string
	Content     []byte
	ContentHash [32]byte
}

// CanonicalCurve is the canonical JSON of what a curve signature signs: the
// curve's identity, provenance and fitted report (its review status, which
// the signature itself changes, is not part of it). encoding/json writes
// struct fields in declaration order and map keys sorted, and floats in
// their shortest exact form, so the same record always gives the same bytes.
func CanonicalCurve(c *Curve) ([]byte, [32]byte, error) {
	doc := struct {
		RecordType     string `json:"record_type"`
		ID             string `json:"id"`
		RunID          string `json:"run_id"`
		RevisionOf     string `json:"revision_of"`
		Method         string `json:"method"`
		MethodRevision int    `json:"method_revision"`
		Instrument     string `json:"instrument"`
		Analyte        string `json:"analyte"`
		Unit           string `json:"unit"`
		Model          string `json:"model"`
		Weighting      string `json:"weighting"`
		Verdict        string `json:"verdict"`
		EngineVersion  string `json:"engine_version"`
		AcquiredAt     string `json:"acquired_at"`
		CreatedBy      string `json:"created_by"`
		Report         any    `json:"report"`
	}{"curve", c.ID, c.RunID, c.RevisionOf, c.Method, c.MethodRevision, c.Instrument, c.Analyte, c.Unit,
		string(c.Model), string(c.Weighting), c.Verdict, c.EngineVersion,
		c.AcquiredAt.UTC().Format(time.RFC3339Nano), c.CreatedBy, c.Report}
	b, err := json.Marshal(doc)
	if err != nil {
		return nil, [32]byte{}, fmt.Errorf("lab: canonical curve: %w", err)
	}
	return b, sha256.Sum256(b), nil
}

// SignatureValid reports whether sig still matches the record's current
// canonical content: false once anything it signed changed.
func SignatureValid(sig *Signature, current [32]byte) bool {
	return len(sig.ContentHash) == 32 && [32]byte(sig.ContentHash) == current
}

// CheckSigner applies the rules of who may sign what: the role for the
// meaning, and the second-person rule against the owners of the tokens that
// posted the run and made the curve (an exclusion's revision).
func CheckSigner(person *Person, meaning, decision string, postedBy []string) error {
	switch meaning {
	case MeaningReview:
		if !person.HasRole(RoleReviewer) && !person.HasRole(RoleQAApprover) {
			return Errorf(KindForbidden, "%s holds neither the %s nor the %s role needed to sign a review", person.Login, RoleReviewer, RoleQAApprover)
		}
		if decision != "" {
			return FieldError("/decision", "a review signature carries no decision; the approval decides")
		}
	case MeaningApproval:
		if !person.HasRole(RoleQAApprover) {
			return Errorf(KindForbidden, "%s does not hold the %s role needed to sign an approval", person.Login, RoleQAApprover)
		}
		if decision != DecisionApprove && decision != DecisionReject {
			return FieldError("/decision", "an approval signature decides %q or %q", DecisionApprove, DecisionReject)
		}
	default:
		return FieldError("/meaning", "a curve is signed with meaning %q or %q", MeaningReview, MeaningApproval)
	}
	if slices.Contains(postedBy, person.Owner()) {
		return &Error{Kind: KindInvalid, Field: "/login", Message: RuleSecondPerson + fmt.Sprintf(" (%s posted this record)", person.Login)}
	}
	return nil
}

// PeopleStore is the persistence of people and signatures.
type PeopleStore interface {
	CreatePerson(ctx context.Context, in PersonInput, roles []string, actor string) (*Person, error)
	ListPeople(ctx context.Context) ([]Person, error)
	GetPerson(ctx context.Context, login string) (*Person, error)
	DisablePerson(ctx context.Context, login, actor string) (*Person, error)
	UnlockPerson(ctx context.Context, login, actor string) (*Person, error)
	// Authenticate checks a login and password, counting failures and
	// locking the account at maxFailures in a row; a disabled or locked
	// account is KindForbidden whatever the password.
	Authenticate(ctx context.Context, c Credentials, maxFailures int) (*Person, error)
	// CreatePersonSession opens a QA-page session for an authenticated
	// person and returns its secret.
	CreatePersonSession(ctx context.Context, person *Person, ttl time.Duration) (string, error)
	// RecordOwners returns the owners of the tokens that posted curve id's
	// run and made the curve.
	RecordOwners(ctx context.Context, curveID string) ([]string, error)
	// SignCurve stores the signature and, for an approval, the curve's
	// review, in one transaction with their audit rows.
	SignCurve(ctx context.Context, in SignatureInput, actor string) (*Signature, error)
	// SignRecord stores an exclusion or release signature with its audit
	// row; a release only while the curve is approved.
	SignRecord(ctx context.Context, in SignatureInput, actor string) (*Signature, error)
	// ListSignatures lists a record's signatures; recordType "" lists
	// every type on recordID.
	ListSignatures(ctx context.Context, recordType, recordID string) ([]Signature, error)
	WithdrawSignature(ctx context.Context, id string, by *Person, reason, actor string) (*Signature, error)
}

// AuditFilter selects audit rows by person (login) and by record (type and
// id); empty fields do not filter.
type AuditFilter struct {
	Person     string
	RecordType string
	RecordID   string
	Limit      int // 1 to MaxAuditLimit; 0 means MaxAuditLimit
}

// MaxAuditLimit bounds one audit search.
const MaxAuditLimit = 1000
