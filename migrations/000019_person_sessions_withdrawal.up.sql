-- People sign in to the QA pages with their login and password, and a
-- withdrawn approval returns its curve to review.
--
-- Sessions: a session is opened either with an API token (token_id, as
-- before) or by a person's login and password (person_id); exactly one of
-- the two. A person's session carries the scopes of the person's roles,
-- read afresh on every request (disabling the person ends the session).
ALTER TABLE ui_sessions ALTER COLUMN token_id DROP NOT NULL;
ALTER TABLE ui_sessions ADD COLUMN person_id uuid REFERENCES people (id);
ALTER TABLE ui_sessions ADD CONSTRAINT ui_sessions_one_owner CHECK ((token_id IS NULL) <> (person_id IS NULL));
CREATE INDEX ui_sessions_person ON ui_sessions (person_id) WHERE person_id IS NOT NULL;

-- Reviews: a review can be withdrawn, once, with a reason (the withdrawal
-- of the approval signature that made it); the row stays. A curve has at
-- most one review in effect (not withdrawn), and may be reviewed again after
-- a withdrawal.
ALTER TABLE reviews ADD COLUMN withdrawn_at timestamptz;
ALTER TABLE reviews ADD COLUMN withdrawn_by text;
ALTER TABLE reviews ADD COLUMN withdrawal_reason text;
ALTER TABLE reviews ADD CONSTRAINT reviews_withdrawal_complete
    CHECK ((withdrawn_at IS NULL) = (withdrawal_reason IS NULL) AND (withdrawn_at IS NULL) = (withdrawn_by IS NULL));
ALTER TABLE reviews DROP CONSTRAINT reviews_pkey;
CREATE UNIQUE INDEX reviews_in_effect ON reviews (curve_id) WHERE withdrawn_at IS NULL;
CREATE INDEX reviews_curve ON reviews (curve_id, at);

DROP TRIGGER reviews_immutable ON reviews;
CREATE TRIGGER reviews_no_delete BEFORE DELETE ON reviews
    FOR EACH ROW EXECUTE FUNCTION reject_change();

-- review_guard lets an UPDATE of a review only withdraw it, once.
CREATE FUNCTION review_guard() RETURNS trigger
LANGUAGE plpgsql AS $$
BEGIN
    IF (to_jsonb(NEW) - ARRAY['withdrawn_at', 'withdrawn_by', 'withdrawal_reason'])
       IS DISTINCT FROM (to_jsonb(OLD) - ARRAY['withdrawn_at', 'withdrawn_by', 'withdrawal_reason'])
       OR OLD.withdrawn_at IS NOT NULL THEN
        RAISE EXCEPTION 'curvekeeper: review of curve % can only be withdrawn, once', OLD.curve_id
            USING ERRCODE = 'CK001';
    END IF;
    RETURN NEW;
END;
$$;

CREATE TRIGGER reviews_guard BEFORE UPDATE ON reviews
    FOR EACH ROW EXECUTE FUNCTION review_guard();

-- curve_guard: as before, an UPDATE of a curve changes only status,
-- reviewed_at and reviewed_by, from pending_review to approved or rejected;
-- and now also back from approved or rejected to pending_review (with
-- reviewed_at and reviewed_by cleared), but only in the transaction that
-- withdraws the curve's review (a review of the curve withdrawn at now(),
-- the transaction's start).
CREATE OR REPLACE FUNCTION curve_guard() RETURNS trigger
LANGUAGE plpgsql AS $$
BEGIN
    IF (to_jsonb(NEW) - ARRAY['status', 'reviewed_at', 'reviewed_by'])
       IS DISTINCT FROM (to_jsonb(OLD) - ARRAY['status', 'reviewed_at', 'reviewed_by']) THEN
        RAISE EXCEPTION 'curvekeeper: curve % is immutable: only its review may be recorded', OLD.id
            USING ERRCODE = 'CK001';
    END IF;
    IF NEW.status IS DISTINCT FROM OLD.status AND OLD.status <> 'pending_review' THEN
        IF NEW.status = 'pending_review' AND EXISTS (
               SELECT 1 FROM reviews r WHERE r.curve_id = OLD.id AND r.withdrawn_at = now()) THEN
            RETURN NEW;
        END IF;
        RAISE EXCEPTION 'curvekeeper: curve % was already reviewed (%)', OLD.id, OLD.status
            USING ERRCODE = 'CK001';
    END IF;
    RETURN NEW;
END;
$$;
