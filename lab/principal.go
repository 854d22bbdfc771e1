package lab

import (
	"fmt"
	"slices"
	"strings"
)

// Scopes a token can carry. Admin holds every other scope too.
const (
	ScopeRunsWrite    = "runs:write"    // instruments posting runs
	ScopeResultsRead  = "results:read"  // LIMS reading curves and predictions
	ScopeCurvesReview = "curves:review" // QA staff reviewing curves
	ScopeAdmin        = "admin"         // everything, plus methods and tokens
)

// Scopes lists every scope, in a fixed order.
var Scopes = []string{ScopeRunsWrite, ScopeResultsRead, ScopeCurvesReview, ScopeAdmin}

// MaxNameLen bounds every identifier the lab names: methods, analytes,
// instruments, levels, sample ids, token names (openapi/openapi.yaml's
// maxLength of each; tested against the spec).
const MaxNameLen = 64

// MaxIdempotencyKeyLen bounds a client's Idempotency-Key (the spec's
// maxLength; tested against it with the fast path's constant).
const MaxIdempotencyKeyLen = 128

// Principal is the caller a request was authenticated as: the token it
// carried (its secret is never kept) and the scopes it grants.
type Principal struct {
	TokenID string
	Name    string
	Scopes  []string
	// Instruments binds a machine token to the instruments it may post
	// for and reach (see access.go); nil for an unbound token.
	Instruments []string
	// Owner is the person ("person:<login>") or instrument
	// ("instrument:<name>") the token belongs to.
	Owner string
}

// Has reports whether the principal holds scope (admin holds all).
func (p Principal) Has(scope string) bool {
	return slices.Contains(p.Scopes, ScopeAdmin) || slices.Contains(p.Scopes, scope)
}

// Actor names the principal in the audit trail: the token, or the person
// of a QA-page session opened with login and password ("person:<login>").
func (p Principal) Actor() string {
	if p.IsPerson() {
		return p.Owner
	}
	return "token:" + p.Name + ":" + p.TokenID
}

// IsPerson reports whether the principal is a person signed in with login
// and password (no token).
func (p Principal) IsPerson() bool { return p.TokenID == "" && strings.HasPrefix(p.Owner, OwnerPerson) }

// ScopesOfRoles is what a person's session may do, by the person's roles:
// every role reads curves and results; an analyst, reviewer or QA approver
// holds curves:review, which in a person's session only signs (what the
// role allows: an analyst an exclusion, a reviewer a review, a QA approver
// an approval or release); an administrator holds admin. A person's
// session never writes runs.
func ScopesOfRoles(roles []string) []string {
	out := []string{ScopeResultsRead}
	if slices.Contains(roles, RoleAnalyst) || slices.Contains(roles, RoleReviewer) || slices.Contains(roles, RoleQAApprover) {
		out = append(out, ScopeCurvesReview)
	}
	if slices.Contains(roles, RoleAdministrator) {
		out = append(out, ScopeAdmin)
	}
	return out
}

// CheckToken validates a new token's name and scopes and returns the scopes
// deduplicated in the order of Scopes.
func CheckToken(name string, scopes []string) ([]string, error) {
	if strings.TrimSpace(name) == "" || len(name) > MaxNameLen {
		return nil, FieldError("/name", "name must be 1 to %d characters", MaxNameLen)
	}
	if len(scopes) == 0 {
		return nil, FieldError("/scopes", "at least one scope is required")
	}
	for i, s := range scopes {
		if !slices.Contains(Scopes, s) {
			return nil, FieldError(fmt.Sprintf("/scopes/%d", i), "unknown scope %q (one of %s)", s, strings.Join(Scopes, ", "))
		}
	}
	var out []string
	for _, s := range Scopes {
		if slices.Contains(scopes, s) {
			out = append(out, s)
		}
	}
	return out, nil
}
