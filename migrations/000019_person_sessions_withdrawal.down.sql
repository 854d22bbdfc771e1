-- Fails when a curve was reviewed again after a withdrawal (two reviews of
-- one curve cannot share the old primary key): records are evidence, so
-- this migration does not delete the withdrawn reviews to go down.
CREATE OR REPLACE FUNCTION curve_guard() RETURNS trigger
LANGUAGE plpgsql AS $$
BEGIN
    IF (to_jsonb(NEW) - ARRAY['status', 'reviewed_at', 'reviewed_by'])
       IS DISTINCT FROM (to_jsonb(OLD) - ARRAY['status', 'reviewed_at', 'reviewed_by']) THEN
        RAISE EXCEPTION 'curvekeeper: curve % is immutable: only its review may be recorded', OLD.id
            USING ERRCODE = 'CK001';
    END IF;
    IF NEW.status IS DISTINCT FROM OLD.status AND OLD.status <> 'pending_review' THEN
        RAISE EXCEPTION 'curvekeeper: curve % was already reviewed (%)', OLD.id, OLD.status
            USING ERRCODE = 'CK001';
    END IF;
    RETURN NEW;
END;
$$;
DROP TRIGGER reviews_guard ON reviews;
DROP FUNCTION review_guard();
DROP TRIGGER reviews_no_delete ON reviews;
CREATE TRIGGER reviews_immutable BEFORE UPDATE OR DELETE ON reviews
    FOR EACH ROW EXECUTE FUNCTION reject_change();
DROP INDEX reviews_curve;
DROP INDEX reviews_in_effect;
ALTER TABLE reviews ADD PRIMARY KEY (curve_id);
ALTER TABLE reviews DROP CONSTRAINT reviews_withdrawal_complete;
ALTER TABLE reviews DROP COLUMN withdrawal_reason;
ALTER TABLE reviews DROP COLUMN withdrawn_by;
ALTER TABLE reviews DROP COLUMN withdrawn_at;
DELETE FROM ui_sessions WHERE person_id IS NOT NULL;
DROP INDEX ui_sessions_person;
ALTER TABLE ui_sessions DROP CONSTRAINT ui_sessions_one_owner;
ALTER TABLE ui_sessions DROP COLUMN person_id;
ALTER TABLE ui_sessions ALTER COLUMN token_id SET NOT NULL;
