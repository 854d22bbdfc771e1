package lab

import (
	"context"
	"fmt"
	"slices"
	"strings"
	"unicode/utf8"
)

// Instrument binding, separation of duties and the shape of free text.
//
// A machine token may be bound to one or more instruments (Principal.
// Instruments). A bound token posts runs only under those instruments'
// names, and every route that names an instrument, a run or a curve reaches
// only those instruments' records: another instrument's name is refused
// (KindForbidden), another instrument's run or curve is not found
// (KindNotFound, as an unknown id, so that ids of other instruments are not
// confirmed). An unbound token (nil Instruments: admin and review tokens,
// and machine tokens issued before binding existed) is not restricted;
// IssueToken refuses a new runs:write token without a binding.

// MaxTokenInstruments bounds the instruments one token may be bound to (the
// spec's maxItems).
const MaxTokenInstruments = 32

// Bound reports whether the principal is bound to instruments.
func (p Principal) Bound() bool { return p.Instruments != nil }

// MayUse refuses (KindForbidden) an instrument a bound principal is not
// bound to; an unbound principal may use every instrument.
func (p Principal) MayUse(instrument string) error {
	if !p.Bound() || slices.Contains(p.Instruments, instrument) {
		return nil
	}
	return Errorf(KindForbidden, "instrument binding: this token is bound to the instruments %s, not to %q",
		strings.Join(p.Instruments, ", "), instrument)
}

// Reach is what a route names: a run or a curve by id, or an instrument by
// name.
type Reach int

// The things a route can reach.
const (
	ReachRun Reach = iota + 1
	ReachCurve
	ReachInstrument
)

// InstrumentOf is what CheckReach reads: the instrument of a stored run or
// curve (KindNotFound for an unknown id). A run's instrument never changes,
// so the answer read before a write still holds when the write commits.
type InstrumentOf interface {
	RunInstrument(ctx context.Context, runID string) (string, error)
	CurveInstrument(ctx context.Context, curveID string) (string, error)
}

// CheckReach applies p's instrument binding to what a route names. It
// reads nothing for an unbound principal.
func (s *Service) CheckReach(ctx context.Context, p Principal, r Reach, ref string) error {
	if !p.Bound() {
		return nil
	}
	var (
		inst, what string
		err        error
	)
	switch r {
	case ReachInstrument:
		return p.MayUse(ref)
	case ReachRun:
		what = "run"
		inst, err = s.Reader.RunInstrument(ctx, ref)
	case ReachCurve:
		what = "curve"
		inst, err = s.Reader.CurveInstrument(ctx, ref)
	default:
		return fmt.Errorf("lab: unknown reach %d", r)
	}
	if err != nil {
		return err
	}
	if !slices.Contains(p.Instruments, inst) {
		return Errorf(KindNotFound, "%s %s not found", what, ref)
	}
	return nil
}

// TokenInput is a token as an administrator issues it.
type TokenInput struct {
	Name   string
	Scopes []string
	// Instruments binds the token (nil: unbound). Required for a token
	// holding runs:write without admin.
	Instruments []string
	// AllowDualRole is the administrator's explicit choice to let one token
	// both post runs and review curves (runs:write with curves:review).
	AllowDualRole bool
	// Owner is the person ("person:<login>") or instrument
	// ("instrument:<name>") the token belongs to; empty: DefaultOwner's.
	Owner string
}

// The rules a new token must satisfy, named in their errors.
const (
	RuleBindingRequired = "instrument_binding_required"
	RuleDualRole        = "dual_role_needs_explicit_choice"
	RuleSelfReview      = "four_eyes"
)

// CheckTokenInput validates a token an administrator issues and returns it
// normalised (scopes in the order of Scopes, instruments deduplicated):
//   - instrument_binding_required: a token with runs:write (and not admin)
//     names the instruments it posts for;
//   - dual_role_needs_explicit_choice: a token with both runs:write and
//     curves:review (and not admin) needs AllowDualRole, since it could
//     review what it posted (the review itself is still refused by the
//     four-eyes rule unless the method allows self-review).
func CheckTokenInput(in TokenInput) (TokenInput, error) {
	scopes, err := CheckToken(in.Name, in.Scopes)
	if err != nil {
		return in, err
	}
	in.Scopes = scopes
	if in.Instruments != nil {
		if len(in.Instruments) == 0 || len(in.Instruments) > MaxTokenInstruments {
			return in, FieldError("/instruments", "a binding names 1 to %d instruments (leave instruments out for an unbound token)", MaxTokenInstruments)
		}
		var out []string
		for i, name := range in.Instruments {
			if err := checkIdentifier(Pointer("instruments", i), name); err != nil {
				return in, err
			}
			if !slices.Contains(out, name) {
				out = append(out, name)
			}
		}
		in.Instruments = out
	}
	admin := slices.Contains(scopes, ScopeAdmin)
	write := slices.Contains(scopes, ScopeRunsWrite)
	if write && !admin && in.Instruments == nil {
		return in, FieldError("/instruments", "%s: a token with %s must be bound to the instruments it posts for", RuleBindingRequired, ScopeRunsWrite)
	}
	if write && !admin && slices.Contains(scopes, ScopeCurvesReview) && !in.AllowDualRole {
		return in, FieldError("/allow_dual_role", "%s: a token with both %s and %s could review what it posts; set allow_dual_role to true to issue it anyway",
			RuleDualRole, ScopeRunsWrite, ScopeCurvesReview)
	}
	return in, nil
}

// checkIdentifier refuses an empty, overlong or control-bearing name.
func checkIdentifier(field, s string) error {
	if strings.TrimSpace(s) == "" || len(s) > MaxNameLen || !utf8.ValidString(s) ||
		strings.ContainsFunc(s, func(r rune) bool { return r < 0x20 || r == 0x7f || isBidiControl(r) }) {
		return FieldError(field, "must be 1 to %d characters without control characters", MaxNameLen)
	}
	return nil
}

// ReviewFacts is what the review rules need of a curve, read with its row
// locked. An actor is what the audit trail names ("token:<name>:<id>" or
// "person:<login>"); its party is who stands behind it: the owner of the
// token ("person:<login>" or "instrument:<name>"), or the person.
type ReviewFacts struct {
	CurveID         string
	RunPostedBy     string // the actor that posted the curve's run
	RevisionBy      string // the actor that made this revision by exclusion; "" for a run's own fit
	AllowSelfReview bool   // the method's explicit choice (QCPolicy.AllowSelfReview)
	Signatures      string // what approval takes (QCPolicy.Signatures)
	SupersededBy    string // the newer revision's id; "" while the curve is current

	RunPostedByParty string // RunPostedBy's party; "" when unknown
	RevisionByParty  string // RevisionBy's party; "" when unknown or no revision
	ReviewerParty    string // the reviewing actor's party; "" when unknown
}

// CheckReview applies the review rules to a review by actor:
//   - a superseded curve never comes into force, so it is not reviewed
//     (KindConflict, naming the newer revision);
//   - four_eyes: the party (person or instrument) that posted the run, or
//     made the revision, does not review it through any of its tokens or its
//     own signature (KindInvalid naming the rule), unless the method allows
//     self-review.
func CheckReview(f ReviewFacts, actor string) error {
	if f.SupersededBy != "" {
		return Errorf(KindConflict, "curve %s was superseded by its revision %s; review the revision instead", f.CurveID, f.SupersededBy)
	}
	if f.AllowSelfReview {
		return nil
	}
	same := func(by, byParty string) bool {
		return actor == by || (f.ReviewerParty != "" && f.ReviewerParty == byParty)
	}
	switch {
	case same(f.RunPostedBy, f.RunPostedByParty):
		return FieldError("/decision", "%s: %s posted the run of curve %s and may not review it, through any token or signature (separation of duties; a method may allow it with allow_self_review)",
			RuleSelfReview, partyOr(f.RunPostedByParty, f.RunPostedBy), f.CurveID)
	case f.RevisionBy != "" && same(f.RevisionBy, f.RevisionByParty):
		return FieldError("/decision", "%s: %s made revision %s by excluding standards and may not review it, through any token or signature (separation of duties; a method may allow it with allow_self_review)",
			RuleSelfReview, partyOr(f.RevisionByParty, f.RevisionBy), f.CurveID)
	}
	return nil
}

func partyOr(party, actor string) string {
	if party != "" {
		return party
	}
	return actor
}

// RuleSignedApproval is the rule an unsigned review breaks on a method that
// requires signatures (QCPolicy.Signatures).
const RuleSignedApproval = "signed approval: this method's curves are approved or rejected only by a person's electronic signature (POST /v1/curves/{id}/signatures), not by a token's review"

// RuleReviewBeforeApproval is the rule an approval breaks on a method that
// requires a signed review first.
const RuleReviewBeforeApproval = "review before approval: this method needs a signed review by another person before the approval signature"

// CheckUnsignedReview refuses the review route of a token (or any review
// that is not a signature) on a method that requires signatures.
func CheckUnsignedReview(f ReviewFacts) error {
	if f.Signatures != "" {
		return FieldError("/decision", "%s (the method requires %q)", RuleSignedApproval, f.Signatures)
	}
	return nil
}

// CheckApprovalSignature applies the method's signature requirement to an
// approval signature that approves (a rejection withholds, so it needs no
// review first): under SignaturesReviewAndApproval a live review signature
// on the same content by a person other than signer must be on the curve.
func CheckApprovalSignature(f ReviewFacts, decision, signer string, liveReviewers []string) error {
	if f.Signatures != SignaturesReviewAndApproval || decision != DecisionApprove {
		return nil
	}
	for _, r := range liveReviewers {
		if r != signer {
			return nil
		}
	}
	if len(liveReviewers) > 0 {
		return FieldError("/meaning", "%s (the review on this curve is the approver's own)", RuleReviewBeforeApproval)
	}
	return FieldError("/meaning", "%s (there is none on this curve)", RuleReviewBeforeApproval)
}

// isBidiControl reports the invisible bidirectional controls that change
// how text reads without showing: U+202A–U+202E (embeddings, overrides)
// and U+2066–U+2069 (isolates).
func isBidiControl(r rune) bool {
	return (r >= 0x202A && r <= 0x202E) || (r >= 0x2066 && r <= 0x2069)
}

// CheckFreeText refuses free text (a reason) carrying an invisible
// bidirectional control, which would make it read otherwise on a page than
// it was written.
func CheckFreeText(field, s string) error {
	if i := strings.IndexFunc(s, isBidiControl); i >= 0 {
		r, _ := utf8.DecodeRuneInString(s[i:])
		return FieldError(field, "must not contain the invisible bidirectional control U+%04X (at byte %d)", r, i)
	}
	return nil
}
