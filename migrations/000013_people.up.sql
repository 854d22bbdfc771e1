-- People and their electronic signatures.
--
-- A person has a unique login, a full printed name (what a signature shows),
-- one or more roles and an Argon2id hash of the password (PHC string; the
-- password itself is never stored). Repeated failed sign-ins lock the
-- account; an administrator unlocks or disables it. People are never
-- deleted: a disabled person's signatures and audit rows keep naming them.
--
-- Every token belongs to an owner: 'person:<login>', 'instrument:<name>', or
-- (tokens issued before this migration that are not instrument tokens) the
-- actor who issued them.
--
-- A signature binds a person, a meaning and a time to a record by the
-- SHA-256 of the record's canonical JSON at the moment of signing. It can be
-- withdrawn once, with a reason; it is never changed otherwise or deleted.

CREATE TABLE people (
    id              uuid        PRIMARY KEY,
    login           text        NOT NULL UNIQUE CHECK (login ~ '^[a-z0-9][a-z0-9._-]{0,63}$'),
    full_name       text        NOT NULL CHECK (length(full_name) BETWEEN 1 AND 200),
    roles           text[]      NOT NULL CHECK (
                        cardinality(roles) >= 1
                        AND roles <@ ARRAY['analyst', 'reviewer', 'qa-approver', 'administrator']::text[]),
    password_hash   text        NOT NULL CHECK (password_hash LIKE '$argon2id$%'),
    failed_attempts integer     NOT NULL DEFAULT 0 CHECK (failed_attempts >= 0),
    locked_at       timestamptz,
    disabled_at     timestamptz,
    disabled_by     text,
    created_at      timestamptz NOT NULL DEFAULT now(),
    created_by      text        NOT NULL
);

CREATE TRIGGER people_no_delete BEFORE DELETE ON people
    FOR EACH ROW EXECUTE FUNCTION reject_change();
CREATE TRIGGER people_no_truncate BEFORE TRUNCATE ON people
    FOR EACH STATEMENT EXECUTE FUNCTION reject_change();

-- Existing tokens: an instrument token (runs:write alone) belongs to the
-- instrument of its name, any other to the actor who issued it. The guard
-- lets a token only be revoked, so it steps aside for this one backfill.
ALTER TABLE tokens ADD COLUMN owner text CHECK (length(owner) BETWEEN 1 AND 300);
ALTER TABLE tokens DISABLE TRIGGER tokens_guard;
UPDATE tokens SET owner = CASE WHEN scopes = ARRAY['runs:write']::text[] THEN 'instrument:' || name ELSE created_by END;
ALTER TABLE tokens ENABLE TRIGGER tokens_guard;
ALTER TABLE tokens ALTER COLUMN owner SET NOT NULL;

CREATE TABLE signatures (
    id                uuid        PRIMARY KEY,
    record_type       text        NOT NULL CHECK (record_type IN ('curve', 'exclusion', 'release')),
    record_id         text        NOT NULL,
    person_id         uuid        NOT NULL REFERENCES people (id),
    login             text        NOT NULL,
    printed_name      text        NOT NULL,
    meaning           text        NOT NULL CHECK (meaning IN ('review', 'approval', 'responsibility')),
    decision          text        NOT NULL DEFAULT '' CHECK (decision IN ('', 'approve', 'reject')),
    reason            text        NOT NULL DEFAULT '',
    signed_at         timestamptz NOT NULL,
    time_zone         text        NOT NULL,
    content_hash      bytea       NOT NULL CHECK (octet_length(content_hash) = 32),
    content           jsonb       NOT NULL,
    withdrawn_at      timestamptz,
    withdrawn_by      text,
    withdrawal_reason text,
    CHECK ((withdrawn_at IS NULL) = (withdrawal_reason IS NULL))
);

CREATE INDEX signatures_record ON signatures (record_type, record_id, signed_at);
CREATE INDEX signatures_person ON signatures (person_id, signed_at);

-- signature_guard lets an UPDATE of a signature only withdraw it, once.
CREATE FUNCTION signature_guard() RETURNS trigger
LANGUAGE plpgsql AS $$
BEGIN
    IF (to_jsonb(NEW) - ARRAY['withdrawn_at', 'withdrawn_by', 'withdrawal_reason'])
       IS DISTINCT FROM (to_jsonb(OLD) - ARRAY['withdrawn_at', 'withdrawn_by', 'withdrawal_reason'])
       OR OLD.withdrawn_at IS NOT NULL THEN
        RAISE EXCEPTION 'curvekeeper: signature % can only be withdrawn, once', OLD.id
            USING ERRCODE = 'CK001';
    END IF;
    RETURN NEW;
END;
$$;

CREATE TRIGGER signatures_guard BEFORE UPDATE ON signatures
    FOR EACH ROW EXECUTE FUNCTION signature_guard();
CREATE TRIGGER signatures_no_delete BEFORE DELETE ON signatures
    FOR EACH ROW EXECUTE FUNCTION reject_change();
CREATE TRIGGER signatures_no_truncate BEFORE TRUNCATE ON signatures
    FOR EACH STATEMENT EXECUTE FUNCTION reject_change();

-- The audit trail is read by person and by record.
CREATE INDEX audit_actor ON audit (actor, id);
