package store

import (
	"context"
	"errors"
	"fmt"
	"strings"
	"time"

	"github.com/jackc/pgx/v5"

	"curvekeeper/internal/password"
	"curvekeeper/lab"
)

// Audit actions and entity of people and signatures.
const (
	ActionPersonCreate      = "person.create"
	ActionPersonDisable     = "person.disable"
	ActionPersonUnlock      = "person.unlock"
	ActionPersonLock        = "person.lock"
	ActionPersonSignInFail  = "person.sign_in_failed"
	ActionSignatureSign     = "signature.sign"
	ActionSignatureWithdraw = "signature.withdraw"
	// ActionCurveReturnToReview: a withdrawn approval returned its curve to
	// pending review.
	ActionCurveReturnToReview = "curve.return_to_review"
	entityPerson              = "person"
	entitySignature           = "signature"
)

// PasswordParams is the Argon2id cost of new password hashes; tests lower it.
var PasswordParams = password.Default

const personColumns = `id, login, full_name, roles, failed_attempts, locked_at, disabled_at, COALESCE(disabled_by, ''), created_at, created_by`

func scanPerson(r pgx.Row) (*lab.Person, error) {
	var p lab.Person
	err := r.Scan(&p.ID, &p.Login, &p.FullName, &p.Roles, &p.FailedAttempts, &p.LockedAt, &p.DisabledAt, &p.DisabledBy, &p.CreatedAt, &p.CreatedBy)
	return &p, err
}

// CreatePerson stores a new account with roles (checked by lab.CheckPerson)
// and the Argon2id hash of its password.
func (db *DB) CreatePerson(ctx context.Context, in lab.PersonInput, roles []string, actor string) (*lab.Person, error) {
	id, err := newID()
	if err != nil {
		return nil, err
	}
	hash, err := password.Hash(in.Password, PasswordParams)
	if err != nil {
		return nil, err
	}
	var p *lab.Person
	err = db.inTx(ctx, func(tx pgx.Tx) error {
		var err error
		p, err = scanPerson(tx.QueryRow(ctx, `
INSERT INTO people (id, login, full_name, roles, password_hash, created_by) VALUES ($1, $2, $3, $4, $5, $6)
RETURNING `+personColumns, id, in.Login, strings.TrimSpace(in.FullName), roles, hash, actor))
		if err != nil {
			if pgCode(err) == codeUniqueViolation {
				return &lab.Error{Kind: lab.KindConflict, Field: "/login", Message: fmt.Sprintf("login %q is taken", in.Login), Err: err}
			}
			return classify("insert person", err)
		}
		return writeAudit(ctx, tx, actor, ActionPersonCreate, entityPerson, p.Login,
			map[string]any{"full_name": p.FullName, "roles": roles})
	})
	if err != nil {
		return nil, classify("create person", err)
	}
	return p, nil
}

// ListPeople lists every account, disabled ones too, by login.
func (db *DB) ListPeople(ctx context.Context) ([]lab.Person, error) {
	rows, err := db.q(ctx).Query(ctx, `SELECT `+personColumns+` FROM people ORDER BY login`)
	if err != nil {
		return nil, classify("list people", err)
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (lab.Person, error) {
		p, err := scanPerson(r)
		return *p, err
	})
	return out, classify("list people", err)
}

// GetPerson returns the account of login.
func (db *DB) GetPerson(ctx context.Context, login string) (*lab.Person, error) {
	p, err := scanPerson(db.q(ctx).QueryRow(ctx, `SELECT `+personColumns+` FROM people WHERE login = $1`, login))
	if errors.Is(err, pgx.ErrNoRows) {
		return nil, lab.Errorf(lab.KindNotFound, "no person with login %q", login)
	}
	if err != nil {
		return nil, classify("get person", err)
	}
	return p, nil
}

// DisablePerson disables login's account for good: no sign-in, no signing,
// and the person's tokens are refused. The row stays. Disabling a disabled
// account changes nothing.
func (db *DB) DisablePerson(ctx context.Context, login, actor string) (*lab.Person, error) {
	return db.changePerson(ctx, login, actor, ActionPersonDisable,
		`UPDATE people SET disabled_at = now(), disabled_by = $2 WHERE login = $1 AND disabled_at IS NULL`)
}

// UnlockPerson clears a lockout (and the count of failures).
func (db *DB) UnlockPerson(ctx context.Context, login, actor string) (*lab.Person, error) {
	return db.changePerson(ctx, login, actor, ActionPersonUnlock,
		`UPDATE people SET locked_at = NULL, failed_attempts = 0 WHERE login = $1 AND (locked_at IS NOT NULL OR failed_attempts > 0) AND $2::text IS NOT NULL`)
}

func (db *DB) changePerson(ctx context.Context, login, actor, action, update string) (*lab.Person, error) {
	var p *lab.Person
	err := db.inTx(ctx, func(tx pgx.Tx) error {
		tag, err := tx.Exec(ctx, update, login, actor)
		if err != nil {
			return classify(action, err)
		}
		p, err = scanPerson(tx.QueryRow(ctx, `SELECT `+personColumns+` FROM people WHERE login = $1`, login))
		if errors.Is(err, pgx.ErrNoRows) {
			return lab.Errorf(lab.KindNotFound, "no person with login %q", login)
		}
		if err != nil {
			return classify("select person", err)
		}
		if tag.RowsAffected() == 0 {
			return nil
		}
		return writeAudit(ctx, tx, actor, action, entityPerson, login, map[string]any{})
	})
	if err != nil {
		return nil, classify(action+" "+login, err)
	}
	return p, nil
}

// errBadCredentials is the one answer to a wrong login or password, so that
// the answer does not tell which logins exist.
func errBadCredentials() error {
	return lab.Errorf(lab.KindForbidden, "the login or password is wrong")
}

// Authenticate checks c and counts failures: at maxFailures wrong passwords
// in a row the account locks until an administrator unlocks it. The count
// and the lock are committed even though the attempt fails; each failure and
// the lock are audited.
func (db *DB) Authenticate(ctx context.Context, c lab.Credentials, maxFailures int) (*lab.Person, error) {
	var (
		person *lab.Person
		denied error
	)
	// Its own transaction even inside a write's unit (Atomically): a
	// failure is counted although the request that made it is refused.
	err := db.inTx(withoutTx(ctx), func(tx pgx.Tx) error {
		denied = nil
		var hash string
		var p lab.Person
		err := tx.QueryRow(ctx, `SELECT `+personColumns+`, password_hash FROM people WHERE login = $1 FOR UPDATE`, c.Login).
			Scan(&p.ID, &p.Login, &p.FullName, &p.Roles, &p.FailedAttempts, &p.LockedAt, &p.DisabledAt, &p.DisabledBy, &p.CreatedAt, &p.CreatedBy, &hash)
		if errors.Is(err, pgx.ErrNoRows) {
			denied = errBadCredentials()
			return nil
		}
		if err != nil {
			return classify("select person", err)
		}
		if p.DisabledAt != nil {
			denied = lab.Errorf(lab.KindForbidden, "the account %s is disabled", p.Login)
			return nil
		}
		if p.LockedAt != nil {
			denied = lab.Errorf(lab.KindForbidden, "the account %s is locked after %d failed sign-ins; an administrator can unlock it", p.Login, p.FailedAttempts)
			return nil
		}
		ok, err := password.Verify(c.Password, hash)
		if err != nil {
			return fmt.Errorf("store: password of %s: %w", p.Login, err)
		}
		if ok {
			if p.FailedAttempts > 0 {
				if _, err := tx.Exec(ctx, `UPDATE people SET failed_attempts = 0 WHERE id = $1`, p.ID); err != nil {
					return classify("reset failures", err)
				}
				p.FailedAttempts = 0
			}
			person = &p
			return nil
		}
		denied = errBadCredentials()
		p.FailedAttempts++
		lock := p.FailedAttempts >= maxFailures
		if _, err := tx.Exec(ctx, `UPDATE people SET failed_attempts = $2, locked_at = CASE WHEN $3 THEN now() END WHERE id = $1`,
			p.ID, p.FailedAttempts, lock); err != nil {
			return classify("count failure", err)
		}
		action := ActionPersonSignInFail
		if lock {
			action = ActionPersonLock
		}
		return writeAudit(ctx, tx, "person:"+p.Login, action, entityPerson, p.Login,
			map[string]any{"failed_attempts": p.FailedAttempts, "max_failures": maxFailures})
	})
	if err != nil {
		return nil, classify("authenticate", err)
	}
	if denied != nil {
		return nil, denied
	}
	return person, nil
}

// RecordOwners returns the owners of the tokens that posted curve id's run
// and made the curve (the same token for a run's own fit; the excluding
// analyst's for an exclusion's revision), and the people whose live
// signature takes responsibility for the exclusion. An actor that names no
// token (bootstrap, older rows) is returned as it is.
func (db *DB) RecordOwners(ctx context.Context, curveID string) ([]string, error) {
	id, err := parseID("curve", curveID)
	if err != nil {
		return nil, err
	}
	rows, err := db.q(ctx).Query(ctx, `
SELECT DISTINCT COALESCE(t.owner, a.actor)
FROM curves c JOIN runs r ON r.id = c.run_id,
     LATERAL (VALUES (r.received_by), (c.created_by)) AS a(actor)
LEFT JOIN tokens t ON a.actor LIKE 'token:%' AND t.id::text = substring(a.actor FROM '[0-9a-f-]{36}$')
WHERE c.id = $1
UNION
SELECT 'person:' || s.login FROM signatures s
WHERE s.record_type = 'exclusion' AND s.record_id = $1::text AND s.withdrawn_at IS NULL`, id)
	if err != nil {
		return nil, classify("record owners", err)
	}
	out, err := pgx.CollectRows(rows, pgx.RowTo[string])
	if err != nil {
		return nil, classify("record owners", err)
	}
	if len(out) == 0 {
		return nil, lab.Errorf(lab.KindNotFound, "curve %s not found", id)
	}
	return out, nil
}

const signatureColumns = `id, record_type, record_id, person_id, login, printed_name, meaning, decision, reason, signed_at, time_zone,
content_hash, content, withdrawn_at, COALESCE(withdrawn_by, ''), COALESCE(withdrawal_reason, '')`

func scanSignature(r pgx.Row) (*lab.Signature, error) {
	var s lab.Signature
	err := r.Scan(&s.ID, &s.RecordType, &s.RecordID, &s.PersonID, &s.Login, &s.PrintedName, &s.Meaning, &s.Decision, &s.Reason,
		&s.SignedAt, &s.TimeZone, &s.ContentHash, &s.Content, &s.WithdrawnAt, &s.WithdrawnBy, &s.WithdrawalReason)
	return &s, err
}

// SignCurve stores a signature on a curve and, for an approval, the curve's
// review (status, results' release states), in one transaction with their
// audit rows. An approval of a method that needs a review first is refused
// unless a live review signature of another person on the same content is
// on the curve (lab.CheckApprovalSignature).
func (db *DB) SignCurve(ctx context.Context, in lab.SignatureInput, actor string) (*lab.Signature, error) {
	curveID, id, err := newSignatureIDs(in)
	if err != nil {
		return nil, err
	}
	who := "person:" + in.Person.Login
	var sig *lab.Signature
	err = db.inTx(ctx, func(tx pgx.Tx) error {
		var status string
		err := tx.QueryRow(ctx, `SELECT status FROM curves WHERE id = $1 FOR UPDATE`, curveID).Scan(&status)
		if errors.Is(err, pgx.ErrNoRows) {
			return lab.Errorf(lab.KindNotFound, "curve %s not found", curveID)
		}
		if err != nil {
			return classify("select curve", err)
		}
		if status != lab.StatusPendingReview {
			return lab.Errorf(lab.KindConflict, "curve %s is %s: it is signed while pending review", curveID, status)
		}
		var signedAt time.Time
		if err := tx.QueryRow(ctx, `SELECT now()`).Scan(&signedAt); err != nil {
			return classify("now", err)
		}
		if in.Meaning == lab.MeaningApproval {
			facts, err := loadReviewFacts(ctx, tx, curveID, who)
			if err != nil {
				return err
			}
			rows, err := tx.Query(ctx, `SELECT login FROM signatures WHERE record_type = 'curve' AND record_id = $1
AND meaning = 'review' AND withdrawn_at IS NULL AND content_hash = $2`, curveID, in.ContentHash[:])
			if err != nil {
				return classify("select review signatures", err)
			}
			reviewers, err := pgx.CollectRows(rows, pgx.RowTo[string])
			if err != nil {
				return classify("select review signatures", err)
			}
			if err := lab.CheckApprovalSignature(*facts, in.Decision, in.Person.Login, reviewers); err != nil {
				return err
			}
			status := map[string]string{lab.DecisionApprove: lab.StatusApproved, lab.DecisionReject: lab.StatusRejected}[in.Decision]
			if _, err := reviewCurveTx(ctx, tx, curveID, in.Decision, status, in.Reason, who, true); err != nil {
				return err
			}
		}
		in.RecordType, in.RecordID = lab.SubjectCurve, curveID
		sig, err = insertSignature(ctx, tx, id, in, signedAt, actor)
		return err
	})
	if err != nil {
		return nil, classify("sign curve "+curveID, err)
	}
	return sig, nil
}

// newSignatureIDs checks the signed curve's id and draws the new
// signature's.
func newSignatureIDs(in lab.SignatureInput) (curveID, id string, err error) {
	if curveID, err = parseID("curve", in.RecordID); err != nil {
		return "", "", err
	}
	id, err = newID()
	return curveID, id, err
}

// insertSignature stores signature in as id, signed at signedAt, with its
// audit row on the curve (every subject's record id is a curve's).
func insertSignature(ctx context.Context, tx pgx.Tx, id string, in lab.SignatureInput, signedAt time.Time, actor string) (*lab.Signature, error) {
	sig, err := scanSignature(tx.QueryRow(ctx, `
INSERT INTO signatures (id, record_type, record_id, person_id, login, printed_name, meaning, decision, reason, signed_at, time_zone, content_hash, content)
VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13)
RETURNING `+signatureColumns, id, in.RecordType, in.RecordID, in.Person.ID, in.Person.Login, in.Person.FullName, in.Meaning, in.Decision,
		strings.TrimSpace(in.Reason), signedAt, in.TimeZone, in.ContentHash[:], in.Content))
	if err != nil {
		return nil, classify("insert signature", err)
	}
	return sig, writeAudit(ctx, tx, lab.OwnerPerson+in.Person.Login, ActionSignatureSign, entityCurve, in.RecordID, map[string]any{
		"signature": id, "subject": in.RecordType, "printed_name": in.Person.FullName, "meaning": in.Meaning, "decision": in.Decision,
		"reason": sig.Reason, "content_sha256": fmt.Sprintf("%x", in.ContentHash), "via": actor,
	})
}

// SignRecord stores an exclusion or release signature on curve
// in.RecordID with its audit row, in one transaction. A release is stored
// only while the curve (locked) is approved, so that it cannot race the
// withdrawal of the approval.
func (db *DB) SignRecord(ctx context.Context, in lab.SignatureInput, actor string) (*lab.Signature, error) {
	curveID, id, err := newSignatureIDs(in)
	if err != nil {
		return nil, err
	}
	in.RecordID = curveID
	var sig *lab.Signature
	err = db.inTx(ctx, func(tx pgx.Tx) error {
		var status string
		var signedAt time.Time
		err := tx.QueryRow(ctx, `SELECT status, now() FROM curves WHERE id = $1 FOR UPDATE`, curveID).Scan(&status, &signedAt)
		if errors.Is(err, pgx.ErrNoRows) {
			return lab.Errorf(lab.KindNotFound, "curve %s not found", curveID)
		}
		if err != nil {
			return classify("select curve", err)
		}
		if in.RecordType == lab.SubjectRelease && status != lab.StatusApproved {
			return lab.Errorf(lab.KindConflict, "curve %s is %s: its results are released only once it is approved", curveID, status)
		}
		sig, err = insertSignature(ctx, tx, id, in, signedAt, actor)
		return err
	})
	if err != nil {
		return nil, classify("sign "+in.RecordType+" of curve "+curveID, err)
	}
	return sig, nil
}

// ListSignatures returns a record's signatures, withdrawn ones too, in the
// order they were made; recordType "" returns those of every type.
func (db *DB) ListSignatures(ctx context.Context, recordType, recordID string) ([]lab.Signature, error) {
	rows, err := db.q(ctx).Query(ctx, `SELECT `+signatureColumns+` FROM signatures WHERE ($1 = '' OR record_type = $1) AND record_id = $2 ORDER BY signed_at, id`,
		recordType, recordID)
	if err != nil {
		return nil, classify("list signatures", err)
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (lab.Signature, error) {
		s, err := scanSignature(r)
		return *s, err
	})
	return out, classify("list signatures", err)
}

// WithdrawSignature withdraws signature id, once, with a reason, by its
// signer or a QA approver (checked by the caller); the row stays and the
// withdrawal is audited on the record.
func (db *DB) WithdrawSignature(ctx context.Context, id string, by *lab.Person, reason, actor string) (*lab.Signature, error) {
	id, err := parseID("signature", id)
	if err != nil {
		return nil, err
	}
	var sig *lab.Signature
	err = db.inTx(ctx, func(tx pgx.Tx) error {
		var err error
		sig, err = scanSignature(tx.QueryRow(ctx, `SELECT `+signatureColumns+` FROM signatures WHERE id = $1 FOR UPDATE`, id))
		if errors.Is(err, pgx.ErrNoRows) {
			return lab.Errorf(lab.KindNotFound, "signature %s not found", id)
		}
		if err != nil {
			return classify("select signature", err)
		}
		if sig.WithdrawnAt != nil {
			return lab.Errorf(lab.KindConflict, "signature %s was already withdrawn", id)
		}
		if sig.Login != by.Login && !by.HasRole(lab.RoleQAApprover) {
			return lab.Errorf(lab.KindForbidden, "only the signer or a %s may withdraw a signature", lab.RoleQAApprover)
		}
		who := "person:" + by.Login
		if sig.RecordType == entityCurve && sig.Meaning == lab.MeaningReview {
			if err := checkReviewWithdrawal(ctx, tx, sig); err != nil {
				return err
			}
		}
		sig, err = scanSignature(tx.QueryRow(ctx, `
UPDATE signatures SET withdrawn_at = now(), withdrawn_by = $2, withdrawal_reason = $3 WHERE id = $1
RETURNING `+signatureColumns, id, by.FullName+" ("+by.Login+")", reason))
		if err != nil {
			return classify("withdraw signature", err)
		}
		if err := writeAudit(ctx, tx, who, ActionSignatureWithdraw, sig.RecordType, sig.RecordID, map[string]any{
			"signature": id, "reason": reason, "meaning": sig.Meaning, "signer": sig.PrintedName, "via": actor,
		}); err != nil {
			return err
		}
		if sig.RecordType == entityCurve && sig.Meaning == lab.MeaningApproval {
			return returnToReview(ctx, tx, sig, who, reason)
		}
		return nil
	})
	if err != nil {
		return nil, classify("withdraw signature "+id, err)
	}
	return sig, nil
}

// checkReviewWithdrawal refuses to withdraw review signature sig while a
// live approval made after it rests on it: on a method that requires a
// review before approval (lab.SignaturesReviewAndApproval), the approval
// is withdrawn first. Elsewhere a review signature is withdrawn freely.
func checkReviewWithdrawal(ctx context.Context, tx pgx.Tx, sig *lab.Signature) error {
	facts, err := loadReviewFacts(ctx, tx, sig.RecordID, "")
	if err != nil {
		return err
	}
	if facts.Signatures != lab.SignaturesReviewAndApproval {
		return nil
	}
	var later int
	err = tx.QueryRow(ctx, `SELECT count(*) FROM signatures WHERE record_type = 'curve' AND record_id = $1
AND meaning = 'approval' AND decision = 'approve' AND withdrawn_at IS NULL AND signed_at >= $2`, sig.RecordID, sig.SignedAt).Scan(&later)
	if err != nil {
		return classify("select approvals", err)
	}
	if later > 0 {
		return lab.Errorf(lab.KindConflict, "%s: an approval signature on curve %s rests on this review; withdraw the approval first", lab.RuleReviewBeforeApproval, sig.RecordID)
	}
	return nil
}

// returnToReview undoes the review that the approval signature sig made, in
// tx: the review is withdrawn (the row stays), the curve goes back to
// pending_review, its results' release states follow (releasable results
// become provisional, or withheld when the curve failed its checks) with
// one event each, and the return is audited. A curve whose review in
// effect is not the signer's (already returned) is left as it is.
func returnToReview(ctx context.Context, tx pgx.Tx, sig *lab.Signature, who, reason string) error {
	var status string
	err := tx.QueryRow(ctx, `SELECT status FROM curves WHERE id = $1 FOR UPDATE`, sig.RecordID).Scan(&status)
	if err != nil {
		return classify("select curve "+sig.RecordID, err)
	}
	tag, err := tx.Exec(ctx, `UPDATE reviews SET withdrawn_at = now(), withdrawn_by = $2, withdrawal_reason = $3
WHERE curve_id = $1 AND withdrawn_at IS NULL AND actor = $4`, sig.RecordID, who, reason, lab.OwnerPerson+sig.Login)
	if err != nil {
		return classify("withdraw review", err)
	}
	if tag.RowsAffected() == 0 || status == lab.StatusPendingReview {
		return nil
	}
	if _, err := tx.Exec(ctx, `UPDATE curves SET status = 'pending_review', reviewed_at = NULL, reviewed_by = NULL WHERE id = $1`, sig.RecordID); err != nil {
		return classify("return curve to review", err)
	}
	if err := writeAudit(ctx, tx, who, ActionCurveReturnToReview, entityCurve, sig.RecordID, map[string]any{
		"signature": sig.ID, "reason": reason, "from": status, "to": lab.StatusPendingReview,
	}); err != nil {
		return err
	}
	events := &eventBuffer{}
	if _, err := refreshCurveResults(ctx, tx, sig.RecordID, lab.CauseWithdrawal, events); err != nil {
		return err
	}
	return flushEvents(ctx, tx, events)
}

// SearchAudit returns audit rows by person and by record, newest first, at
// most f.Limit: a person's rows are those signed as "person:<login>" and
// those of every token the person owns.
func (db *DB) SearchAudit(ctx context.Context, f lab.AuditFilter) ([]lab.AuditEvent, error) {
	rows, err := db.q(ctx).Query(ctx, `
SELECT a.id, a.at, a.actor, a.action, a.entity_type, a.entity_id, a.detail
FROM audit a
WHERE ($1 = '' OR a.actor = 'person:' || $1
       OR a.actor IN (SELECT 'token:' || t.name || ':' || t.id FROM tokens t WHERE t.owner = 'person:' || $1))
  AND ($2 = '' OR a.entity_type = $2)
  AND ($3 = '' OR a.entity_id = $3)
ORDER BY a.id DESC
LIMIT $4`, f.Person, f.RecordType, f.RecordID, f.Limit)
	if err != nil {
		return nil, classify("search audit", err)
	}
	out, err := pgx.CollectRows(rows, func(row pgx.CollectableRow) (lab.AuditEvent, error) {
		var e lab.AuditEvent
		err := row.Scan(&e.ID, &e.At, &e.Actor, &e.Action, &e.EntityType, &e.EntityID, &e.Detail)
		return e, err
	})
	return out, classify("search audit", err)
}
