package store_test

import (
	"context"
	"errors"
	"strings"
	"testing"

	"curvekeeper/internal/password"
	"curvekeeper/lab"
	"curvekeeper/store"
)

func init() {
	// A cheap Argon2id cost for tests; the format and the check are the
	// same (internal/password tests the default against the reference vector).
	store.PasswordParams = password.Params{MemoryKiB: 64, Time: 1, Threads: 1, SaltLen: 16, KeyLen: 32}
}

func mustPerson(t *testing.T, svc *lab.Service, login, name string, roles ...string) *lab.Person {
	t.Helper()
	p, err := svc.CreatePerson(context.Background(), lab.Principal{Name: "admin", TokenID: "t"},
		lab.PersonInput{Login: login, FullName: name, Roles: roles, Password: login + "-secret-pw"})
	if err != nil {
		t.Fatalf("CreatePerson %s: %v", login, err)
	}
	return p
}

func creds(login string) lab.Credentials {
	return lab.Credentials{Login: login, Password: login + "-secret-pw"}
}

func TestPeopleLockoutAndDisable(t *testing.T) {
	db := newDB(t)
	ctx := context.Background()
	svc := lab.NewService(db)
	svc.People.MaxFailedSignIns = 3
	admin := lab.Principal{Name: "admin", TokenID: "t"}
	mustPerson(t, svc, "ada", "Ada Example", lab.RoleAnalyst)
	if _, err := svc.CreatePerson(ctx, admin, lab.PersonInput{Login: "ada", FullName: "Other", Roles: []string{lab.RoleAnalyst}, Password: "0123456789"}); lab.KindOf(err) != lab.KindConflict {
		t.Errorf("second person with login ada: %v, want a conflict", err)
	}
	_, err := svc.CreatePerson(ctx, admin, lab.PersonInput{Login: "bob", FullName: "Bob", Roles: []string{"superuser"}, Password: "0123456789"})
	wantKind(t, err, lab.KindInvalid)

	if p, err := svc.Authenticate(ctx, creds("ada")); err != nil || p.FullName != "Ada Example" {
		t.Fatalf("Authenticate = %+v, %v", p, err)
	}
	for i := 1; i <= 3; i++ {
		_, err := svc.Authenticate(ctx, lab.Credentials{Login: "ada", Password: "wrong-password"})
		wantKind(t, err, lab.KindForbidden)
	}
	// Locked: the right password is refused too.
	_, err = svc.Authenticate(ctx, creds("ada"))
	if lab.KindOf(err) != lab.KindForbidden || !strings.Contains(err.Error(), "locked") {
		t.Fatalf("after 3 failures: %v, want locked", err)
	}
	if p, _ := svc.GetPerson(ctx, "ada"); p.LockedAt == nil || p.FailedAttempts != 3 {
		t.Errorf("person after lockout = %+v", p)
	}
	if _, err := svc.UnlockPerson(ctx, admin, "ada"); err != nil {
		t.Fatal(err)
	}
	if _, err := svc.Authenticate(ctx, creds("ada")); err != nil {
		t.Fatalf("after unlock: %v", err)
	}

	// A person's token is refused once the person is disabled; the row stays.
	id, secret, err := svc.IssueToken(ctx, admin, lab.TokenInput{Name: "ada-laptop", Scopes: []string{lab.ScopeCurvesReview}, Owner: "person:ada"})
	if err != nil {
		t.Fatal(err)
	}
	if p, err := db.LookupToken(ctx, secret); err != nil || p.TokenID != id || p.Owner != "person:ada" {
		t.Fatalf("LookupToken = %+v, %v", p, err)
	}
	if _, err := svc.DisablePerson(ctx, admin, "ada"); err != nil {
		t.Fatal(err)
	}
	_, err = db.LookupToken(ctx, secret)
	wantKind(t, err, lab.KindNotFound)
	_, err = svc.Authenticate(ctx, creds("ada"))
	wantKind(t, err, lab.KindForbidden)
	if _, err := db.Pool.Exec(ctx, `DELETE FROM people WHERE login = 'ada'`); err == nil {
		t.Error("a person row could be deleted")
	}
	// An instrument token defaults to its instrument.
	if _, s2, err := svc.IssueToken(ctx, admin, lab.TokenInput{Name: "ic-02", Scopes: []string{lab.ScopeRunsWrite}, Instruments: []string{"ic-02"}}); err != nil {
		t.Fatal(err)
	} else if p, _ := db.LookupToken(ctx, s2); p.Owner != "instrument:ic-02" {
		t.Errorf("instrument token owner = %q", p.Owner)
	}
}

func TestSignCurve(t *testing.T) {
	db := newDB(t)
	ctx := context.Background()
	svc := lab.NewService(db)
	admin := lab.Principal{Name: "admin", TokenID: "t"}
	mustPerson(t, svc, "ana", "Ana Analyst", lab.RoleAnalyst, lab.RoleQAApprover)
	mustPerson(t, svc, "quinn", "Quinn Approver", lab.RoleQAApprover)
	mustPerson(t, svc, "rey", "Rey Reviewer", lab.RoleReviewer)

	// ana posts the run through her own token.
	tokID, secret, err := svc.IssueToken(ctx, admin, lab.TokenInput{Name: "ana-uploads", Scopes: []string{lab.ScopeRunsWrite}, Instruments: []string{"ic-01"}, Owner: "person:ana"})
	if err != nil {
		t.Fatal(err)
	}
	poster, err := db.LookupToken(ctx, secret)
	if err != nil || poster.TokenID != tokID {
		t.Fatal(err)
	}
	m := mustMethod(t, db, "nitrate-ic")
	in, curves := runInput(m, baseTime)
	in.TokenID, in.Actor = poster.TokenID, poster.Actor()
	created, err := db.CreateRun(ctx, in, curves)
	if err != nil {
		t.Fatal(err)
	}
	curveID := created.Curves[0].ID

	// The analyst who posted may not approve, even holding the role.
	_, err = svc.SignCurve(ctx, admin, curveID, creds("ana"), lab.MeaningApproval, lab.DecisionApprove, "")
	var le *lab.Error
	if !errors.As(err, &le) || le.Kind != lab.KindInvalid || !strings.Contains(le.Message, "second-person review") {
		t.Fatalf("approval by the poster = %v, want the second-person rule", err)
	}
	// A wrong password signs nothing.
	_, err = svc.SignCurve(ctx, admin, curveID, lab.Credentials{Login: "quinn", Password: "not-quinns-pw"}, lab.MeaningApproval, lab.DecisionApprove, "")
	wantKind(t, err, lab.KindForbidden)
	// A reviewer may review but not approve.
	_, err = svc.SignCurve(ctx, admin, curveID, creds("rey"), lab.MeaningApproval, lab.DecisionApprove, "")
	wantKind(t, err, lab.KindForbidden)
	rs, err := svc.SignCurve(ctx, admin, curveID, creds("rey"), lab.MeaningReview, "", "residuals look fine")
	if err != nil {
		t.Fatal(err)
	}
	as, err := svc.SignCurve(ctx, admin, curveID, creds("quinn"), lab.MeaningApproval, lab.DecisionApprove, "")
	if err != nil {
		t.Fatal(err)
	}
	if as.PrintedName != "Quinn Approver" || as.Meaning != lab.MeaningApproval || len(as.ContentHash) != 32 {
		t.Errorf("approval signature = %+v", as)
	}
	if string(as.ContentHash) != string(rs.ContentHash) {
		t.Error("review and approval of the same unchanged curve signed different content")
	}
	c, _ := db.GetCurve(ctx, curveID)
	if c.Status != lab.StatusApproved || c.ReviewedBy != "person:quinn" {
		t.Errorf("curve after approval: %s by %s", c.Status, c.ReviewedBy)
	}
	_, want, _ := lab.CanonicalCurve(c)
	if [32]byte(as.ContentHash) != want {
		t.Error("the signature's hash is not the SHA-256 of the curve's canonical JSON")
	}
	// The signature does not move to another curve.
	other, _ := db.GetCurve(ctx, created.Curves[1].ID)
	if _, h, _ := lab.CanonicalCurve(other); lab.SignatureValid(as, h) {
		t.Error("the signature validates against another curve")
	}
	// Withdrawal: needs a reason, keeps the row, is audited.
	_, err = svc.WithdrawSignature(ctx, admin, as.ID, creds("quinn"), " ")
	wantKind(t, err, lab.KindInvalid)
	_, err = svc.WithdrawSignature(ctx, admin, rs.ID, creds("ana"), "not mine") // ana is a qa-approver: allowed
	if err != nil {
		t.Fatal(err)
	}
	sigs, valid, err := svc.CurveSignatures(ctx, curveID)
	if err != nil || len(sigs) != 2 || !valid[0] || !valid[1] || sigs[0].WithdrawnAt == nil || sigs[0].WithdrawalReason != "not mine" {
		t.Fatalf("signatures = %+v %v, %v", sigs, valid, err)
	}
	if !strings.Contains(sigs[1].Manifestation(), "Quinn Approver — approval — ") {
		t.Errorf("manifestation %q", sigs[1].Manifestation())
	}
	if _, err := db.Pool.Exec(ctx, `UPDATE signatures SET printed_name = 'Someone Else' WHERE id = $1`, as.ID); err == nil {
		t.Error("a signature's name could be changed")
	}
	// Signing a reviewed curve is refused.
	_, err = svc.SignCurve(ctx, admin, curveID, creds("quinn"), lab.MeaningApproval, lab.DecisionReject, "x")
	wantKind(t, err, lab.KindConflict)
}
