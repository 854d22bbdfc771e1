package api

import (
	"context"
	"encoding/hex"
	"time"

	"curvekeeper/api/oapi"
	"curvekeeper/lab"
)

// CreatePerson opens an account.
func (s *Server) CreatePerson(ctx context.Context, req oapi.CreatePersonRequestObject) (oapi.CreatePersonResponseObject, error) {
	b := req.Body
	roles := make([]string, len(b.Roles))
	for i, r := range b.Roles {
		roles[i] = string(r)
	}
	p, err := s.lab.CreatePerson(ctx, mustPrincipal(ctx), lab.PersonInput{Login: string(b.Login), FullName: b.FullName, Roles: roles, Password: b.Password})
	if err != nil {
		return nil, err
	}
	return oapi.CreatePerson201JSONResponse(personOut(p)), nil
}

// ListPeople lists every account.
func (s *Server) ListPeople(ctx context.Context, _ oapi.ListPeopleRequestObject) (oapi.ListPeopleResponseObject, error) {
	ps, err := s.lab.ListPeople(ctx)
	if err != nil {
		return nil, err
	}
	out := oapi.ListPeople200JSONResponse{People: make([]oapi.Person, 0, len(ps))}
	for i := range ps {
		out.People = append(out.People, personOut(&ps[i]))
	}
	return out, nil
}

// DisablePerson disables an account; nothing is deleted.
func (s *Server) DisablePerson(ctx context.Context, req oapi.DisablePersonRequestObject) (oapi.DisablePersonResponseObject, error) {
	p, err := s.lab.DisablePerson(ctx, mustPrincipal(ctx), string(req.Login))
	if err != nil {
		return nil, err
	}
	return oapi.DisablePerson200JSONResponse(personOut(p)), nil
}

// UnlockPerson clears a lockout.
func (s *Server) UnlockPerson(ctx context.Context, req oapi.UnlockPersonRequestObject) (oapi.UnlockPersonResponseObject, error) {
	p, err := s.lab.UnlockPerson(ctx, mustPrincipal(ctx), string(req.Login))
	if err != nil {
		return nil, err
	}
	return oapi.UnlockPerson200JSONResponse(personOut(p)), nil
}

// SignCurve signs a curve with the person's login and password.
func (s *Server) SignCurve(ctx context.Context, req oapi.SignCurveRequestObject) (oapi.SignCurveResponseObject, error) {
	b := req.Body
	var decision string
	if b.Decision != nil {
		decision = string(*b.Decision)
	}
	creds := lab.Credentials{Login: string(b.Login), Password: b.Password}
	var (
		sig *lab.Signature
		err error
	)
	if b.Subject != nil && *b.Subject != oapi.SignatureRequestSubjectCurve {
		if b.Meaning != oapi.SignatureRequestMeaningResponsibility || b.Decision != nil {
			return nil, lab.FieldError("/meaning", "an %s is signed with meaning %q and no decision", *b.Subject, lab.MeaningResponsibility)
		}
		sig, err = s.lab.SignRecord(ctx, mustPrincipal(ctx), req.ID.String(), string(*b.Subject), creds, deref(b.Reason))
	} else {
		sig, err = s.lab.SignCurve(ctx, mustPrincipal(ctx), req.ID.String(), creds, string(b.Meaning), decision, deref(b.Reason))
		s.curveChanged(req.ID.String()) // an approval or rejection changes the status
	}
	if err != nil {
		return nil, err
	}
	return oapi.SignCurve201JSONResponse(signatureOut(sig, true)), nil
}

// ListCurveSignatures lists a curve's signatures with their manifestation.
func (s *Server) ListCurveSignatures(ctx context.Context, req oapi.ListCurveSignaturesRequestObject) (oapi.ListCurveSignaturesResponseObject, error) {
	sigs, valid, err := s.lab.CurveSignatures(ctx, req.ID.String())
	if err != nil {
		return nil, err
	}
	out := oapi.ListCurveSignatures200JSONResponse{Signatures: make([]oapi.Signature, 0, len(sigs))}
	for i := range sigs {
		out.Signatures = append(out.Signatures, signatureOut(&sigs[i], valid[i]))
	}
	return out, nil
}

// WithdrawSignature withdraws a signature with a reason.
func (s *Server) WithdrawSignature(ctx context.Context, req oapi.WithdrawSignatureRequestObject) (oapi.WithdrawSignatureResponseObject, error) {
	b := req.Body
	sig, err := s.lab.WithdrawSignature(ctx, mustPrincipal(ctx), req.ID.String(), lab.Credentials{Login: string(b.Login), Password: b.Password}, b.Reason)
	if err != nil {
		return nil, err
	}
	s.curveChanged(sig.RecordID) // a withdrawn approval returns the curve to review
	return oapi.WithdrawSignature200JSONResponse(signatureOut(sig, true)), nil
}

func personOut(p *lab.Person) oapi.Person {
	return oapi.Person{Login: p.Login, FullName: p.FullName, Roles: p.Roles, FailedAttempts: p.FailedAttempts,
		Locked: p.LockedAt != nil, Disabled: p.DisabledAt != nil, DisabledAt: oapi.TimestampPtr(p.DisabledAt), CreatedAt: oapi.NewTimestamp(p.CreatedAt)}
}

func signatureOut(s *lab.Signature, matches bool) oapi.Signature {
	out := oapi.Signature{ID: uuidOf(s.ID), RecordType: s.RecordType, RecordID: s.RecordID, Login: s.Login,
		PrintedName: s.PrintedName, Meaning: oapi.SignatureMeaning(s.Meaning), SignedAt: oapi.NewTimestamp(s.SignedAt),
		SignedAtLocal: s.Local().Format(time.RFC3339), TimeZone: s.TimeZone, ContentSha256: hex.EncodeToString(s.ContentHash),
		ContentMatches: matches, Manifestation: s.Manifestation(), WithdrawnAt: oapi.TimestampPtr(s.WithdrawnAt)}
	if s.Decision != "" {
		out.Decision = &s.Decision
	}
	if s.Reason != "" {
		out.Reason = &s.Reason
	}
	if s.WithdrawnAt != nil {
		out.WithdrawnBy, out.WithdrawalReason = &s.WithdrawnBy, &s.WithdrawalReason
	}
	return out
}

// SearchAudit returns audit rows by person and by record.
func (s *Server) SearchAudit(ctx context.Context, req oapi.SearchAuditRequestObject) (oapi.SearchAuditResponseObject, error) {
	f := lab.AuditFilter{}
	if q := req.Params; q.Person != nil {
		f.Person = string(*q.Person)
	}
	f.RecordType, f.RecordID = deref(req.Params.RecordType), deref(req.Params.RecordID)
	if req.Params.Limit != nil {
		f.Limit = *req.Params.Limit
	}
	events, err := s.reading(ctx).SearchAudit(ctx, f)
	if err != nil {
		return nil, err
	}
	out := oapi.SearchAudit200JSONResponse{Events: make([]oapi.AuditEvent, 0, len(events))}
	for _, e := range events {
		out.Events = append(out.Events, oapi.AuditEvent{At: oapi.NewTimestamp(e.At), Actor: e.Actor, Action: e.Action, Detail: auditText(e)})
	}
	return out, nil
}
