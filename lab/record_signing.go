package lab

import (
	"context"
	"crypto/sha256"
	"encoding/json"
	"fmt"
	"slices"
	"strings"
	"time"
)

// What a signature signs, besides a curve's review or approval (the
// signature's record type; its record id is the curve's).
const (
	SubjectCurve     = "curve"     // the curve: review or approval
	SubjectExclusion = "exclusion" // the exclusion that made a revision curve: the analyst's responsibility
	SubjectRelease   = "release"   // the results of an approved curve: their release, a QA approver's responsibility
)

// CanonicalExclusion is the canonical JSON of what an exclusion signature
// signs: the revision, the curve it revises, the excluded readings and the
// reasons, and who made it when. Like CanonicalCurve, the struct's field
// order is the byte order; changing it changes every hash.
func CanonicalExclusion(e *Exclusion) ([]byte, [32]byte, error) {
	doc := struct {
		RecordType  string          `json:"record_type"`
		CurveID     string          `json:"curve_id"`
		RevisionOf  string          `json:"revision_of"`
		Points      []ExcludedPoint `json:"points"`
		Reason      string          `json:"reason"`
		RangeReason string          `json:"range_reason"`
		Actor       string          `json:"actor"`
		At          string          `json:"at"`
	}{SubjectExclusion, e.CurveID, e.RevisionOf, e.Points, e.Reason, e.RangeReason, e.Actor, e.At.UTC().Format(time.RFC3339Nano)}
	return canonical(doc)
}

// releasedResult is one result as a release signature signs it.
type releasedResult struct {
	ID            int64    `json:"id"`
	SampleID      string   `json:"sample_id"`
	Analyte       string   `json:"analyte"`
	Concentration *float64 `json:"concentration"`
	Unit          string   `json:"unit"`
	Flags         []string `json:"flags"`
	ReleaseState  string   `json:"release_state"`
}

// CanonicalRelease is the canonical JSON of what a release signature signs:
// the curve (by the SHA-256 of its canonical JSON) and every result against
// it, by id, with its value, flags and release state at that moment. A
// result added, changed or moved to another state afterwards changes the
// hash.
func CanonicalRelease(c *Curve, results []Result) ([]byte, [32]byte, error) {
	_, curveSum, err := CanonicalCurve(c)
	if err != nil {
		return nil, [32]byte{}, err
	}
	rs := make([]releasedResult, 0, len(results))
	for _, r := range results {
		if r.CurveID == c.ID {
			rs = append(rs, releasedResult{r.ID, r.SampleID, r.Analyte, r.Concentration, r.Unit, r.Flags, r.ReleaseState})
		}
	}
	slices.SortFunc(rs, func(a, b releasedResult) int { return int(a.ID - b.ID) })
	doc := struct {
		RecordType  string           `json:"record_type"`
		CurveID     string           `json:"curve_id"`
		CurveSHA256 string           `json:"curve_sha256"`
		Results     []releasedResult `json:"results"`
	}{SubjectRelease, c.ID, fmt.Sprintf("%x", curveSum), rs}
	return canonical(doc)
}

func canonical(doc any) ([]byte, [32]byte, error) {
	b, err := json.Marshal(doc)
	if err != nil {
		return nil, [32]byte{}, fmt.Errorf("lab: canonical record: %w", err)
	}
	return b, sha256.Sum256(b), nil
}

// CheckRecordSigner applies the rules of an exclusion or release
// signature (meaning responsibility): an exclusion is signed by an analyst;
// a release by a QA approver, on an approved curve with at least one
// releasable result, and not by a person who posted the run or made (or
// signed) the exclusion (RuleSecondPerson).
func CheckRecordSigner(person *Person, subject string, c *Curve, results []Result, owners []string) error {
	switch subject {
	case SubjectExclusion:
		if !person.HasRole(RoleAnalyst) {
			return Errorf(KindForbidden, "%s does not hold the %s role needed to sign an exclusion", person.Login, RoleAnalyst)
		}
		return nil
	case SubjectRelease:
		if !person.HasRole(RoleQAApprover) {
			return Errorf(KindForbidden, "%s does not hold the %s role needed to sign a release", person.Login, RoleQAApprover)
		}
		if c.Status != StatusApproved {
			return Errorf(KindConflict, "curve %s is %s: its results are released only once it is approved", c.ID, c.Status)
		}
		if !slices.ContainsFunc(results, func(r Result) bool { return r.CurveID == c.ID && r.ReleaseState == ReleaseReleasable }) {
			return Errorf(KindConflict, "curve %s has no releasable result to release", c.ID)
		}
		if slices.Contains(owners, person.Owner()) {
			return &Error{Kind: KindInvalid, Field: "/login", Message: RuleSecondPerson + fmt.Sprintf(" (%s posted this record)", person.Login)}
		}
		return nil
	}
	return FieldError("/subject", "a signature's subject is %q, %q or %q", SubjectCurve, SubjectExclusion, SubjectRelease)
}

// SignRecord signs the exclusion that made curve id (subject
// SubjectExclusion) or the release of curve id's results (SubjectRelease),
// with meaning responsibility, as the person c authenticates, through the
// request of p. The signed content is CanonicalExclusion or
// CanonicalRelease and its SHA-256.
func (s *Service) SignRecord(ctx context.Context, p Principal, id, subject string, c Credentials, reason string) (*Signature, error) {
	if err := CheckFreeText("/reason", reason); err != nil {
		return nil, err
	}
	person, err := s.Authenticate(ctx, c)
	if err != nil {
		return nil, err
	}
	curve, err := s.GetCurve(ctx, id)
	if err != nil {
		return nil, err
	}
	var (
		content []byte
		sum     [32]byte
		results []Result
		owners  []string
	)
	switch subject {
	case SubjectExclusion:
		ex, err := s.GetExclusion(ctx, curve.ID)
		if err != nil {
			return nil, err
		}
		if content, sum, err = CanonicalExclusion(ex); err != nil {
			return nil, err
		}
	case SubjectRelease:
		if results, err = s.RunResults(ctx, curve.RunID); err != nil {
			return nil, err
		}
		if owners, err = s.people.RecordOwners(ctx, curve.ID); err != nil {
			return nil, err
		}
		if content, sum, err = CanonicalRelease(curve, results); err != nil {
			return nil, err
		}
	}
	if err := CheckRecordSigner(person, subject, curve, results, owners); err != nil {
		return nil, err
	}
	return s.people.SignRecord(ctx, SignatureInput{
		RecordType: subject, RecordID: curve.ID, Person: person, Meaning: MeaningResponsibility,
		Reason: strings.TrimSpace(reason), TimeZone: s.People.ZoneName(), Content: content, ContentHash: sum,
	}, p.Actor())
}

// recordHashes computes the current content hash of each subject that
// sigs sign on curve c (the release's from the run's results as they are
// now).
func (s *Service) recordHashes(ctx context.Context, c *Curve, sigs []Signature) (map[string][32]byte, error) {
	out := map[string][32]byte{}
	var err error
	for _, sig := range sigs {
		if _, done := out[sig.RecordType]; done {
			continue
		}
		var sum [32]byte
		switch sig.RecordType {
		case SubjectCurve:
			_, sum, err = CanonicalCurve(c)
		case SubjectExclusion:
			var ex *Exclusion
			if ex, err = s.GetExclusion(ctx, c.ID); err == nil {
				_, sum, err = CanonicalExclusion(ex)
			}
		case SubjectRelease:
			var results []Result
			if results, err = s.RunResults(ctx, c.RunID); err == nil {
				_, sum, err = CanonicalRelease(c, results)
			}
		}
		if err != nil {
			return nil, err
		}
		out[sig.RecordType] = sum
	}
	return out, nil
}
