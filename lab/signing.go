package lab

import (
	"context"
	"strings"
)

// CreatePerson opens an account on behalf of administrator p.
func (s *Service) CreatePerson(ctx context.Context, p Principal, in PersonInput) (*Person, error) {
	roles, err := CheckPerson(in)
	if err != nil {
		return nil, err
	}
	return s.people.CreatePerson(ctx, in, roles, p.Actor())
}

// ListPeople lists every account.
func (s *Service) ListPeople(ctx context.Context) ([]Person, error) { return s.people.ListPeople(ctx) }

// GetPerson returns login's account.
func (s *Service) GetPerson(ctx context.Context, login string) (*Person, error) {
	return s.people.GetPerson(ctx, login)
}

// DisablePerson disables login's account on behalf of p; nothing is deleted.
func (s *Service) DisablePerson(ctx context.Context, p Principal, login string) (*Person, error) {
	return s.people.DisablePerson(ctx, login, p.Actor())
}

// UnlockPerson clears login's lockout on behalf of p.
func (s *Service) UnlockPerson(ctx context.Context, p Principal, login string) (*Person, error) {
	return s.people.UnlockPerson(ctx, login, p.Actor())
}

// Authenticate checks a person's login and password under the configured
// lockout.
func (s *Service) Authenticate(ctx context.Context, c Credentials) (*Person, error) {
	if c.Login == "" || c.Password == "" {
		return nil, FieldError("/password", "signing needs the login and the password")
	}
	return s.people.Authenticate(ctx, c, s.People.MaxFailures())
}

// SignCurve signs curve id with meaning (review or approval; an approval
// also decides the review) as the person c authenticates, through the
// request of p: the password is asked again at every signature. The signed
// content is the curve's canonical JSON (CanonicalCurve) and its SHA-256.
// The signer must hold the meaning's role and must not have posted the run
// or made the exclusion (RuleSecondPerson).
func (s *Service) SignCurve(ctx context.Context, p Principal, id string, c Credentials, meaning, decision, reason string) (*Signature, error) {
	person, err := s.Authenticate(ctx, c)
	if err != nil {
		return nil, err
	}
	owners, err := s.people.RecordOwners(ctx, id)
	if err != nil {
		return nil, err
	}
	if err := CheckSigner(person, meaning, decision, owners); err != nil {
		return nil, err
	}
	curve, err := s.GetCurve(ctx, id)
	if err != nil {
		return nil, err
	}
	content, sum, err := CanonicalCurve(curve)
	if err != nil {
		return nil, err
	}
	return s.people.SignCurve(ctx, SignatureInput{
		RecordType: "curve", RecordID: curve.ID, Person: person, Meaning: meaning, Decision: decision,
		Reason: strings.TrimSpace(reason), TimeZone: s.People.ZoneName(), Content: content, ContentHash: sum,
	}, p.Actor())
}

// CurveSignatures returns the signatures on curve id (its review and
// approval, the exclusion that made it, the release of its results), each
// with whether it still matches the current content of what it signed.
func (s *Service) CurveSignatures(ctx context.Context, id string) ([]Signature, []bool, error) {
	curve, err := s.GetCurve(ctx, id)
	if err != nil {
		return nil, nil, err
	}
	sigs, err := s.people.ListSignatures(ctx, "", curve.ID)
	if err != nil {
		return nil, nil, err
	}
	sums, err := s.recordHashes(ctx, curve, sigs)
	if err != nil {
		return nil, nil, err
	}
	valid := make([]bool, len(sigs))
	for i := range sigs {
		valid[i] = SignatureValid(&sigs[i], sums[sigs[i].RecordType])
	}
	return sigs, valid, nil
}

// WithdrawSignature withdraws signature id with a reason, by its signer or
// a QA approver, who gives the password again.
func (s *Service) WithdrawSignature(ctx context.Context, p Principal, id string, c Credentials, reason string) (*Signature, error) {
	reason = strings.TrimSpace(reason)
	if reason == "" {
		return nil, FieldError("/reason", "a withdrawal needs a reason")
	}
	person, err := s.Authenticate(ctx, c)
	if err != nil {
		return nil, err
	}
	return s.people.WithdrawSignature(ctx, id, person, reason, p.Actor())
}

// SearchAudit returns audit rows by person and record, newest first.
func (s *Service) SearchAudit(ctx context.Context, f AuditFilter) ([]AuditEvent, error) {
	if f.Limit <= 0 || f.Limit > MaxAuditLimit {
		f.Limit = MaxAuditLimit
	}
	return s.Reader.SearchAudit(ctx, f)
}
