-- curvekeeper core schema: tokens, methods, runs and their readings, fitted
-- curves, reviews, the audit trail and idempotency keys.
--
-- Evidence is immutable. Runs, readings, samples, method revisions, reviews and
-- audit rows reject UPDATE, DELETE and TRUNCATE in triggers; a curve accepts
-- only its one review transition (status and reviewed_* columns). Every such
-- refusal raises SQLSTATE CK001 so that the store can recognise it by code.
--
-- Numbers that must be finite carry a CHECK of the form x > '-Infinity' AND
-- x < 'Infinity', which also refuses NaN (PostgreSQL orders NaN above every
-- other value).

-- ---------------------------------------------------------------------------
-- Guards
-- ---------------------------------------------------------------------------

-- reject_change refuses the statement outright (UPDATE, DELETE or TRUNCATE on
-- an append-only table).
CREATE FUNCTION reject_change() RETURNS trigger
LANGUAGE plpgsql AS $$
BEGIN
    RAISE EXCEPTION 'curvekeeper: % is append-only: % is not allowed', TG_TABLE_NAME, TG_OP
        USING ERRCODE = 'CK001',
              HINT = 'records are evidence; write a new record instead of changing one';
END;
$$;

-- curve_guard lets an UPDATE of a curve change only status, reviewed_at and
-- reviewed_by, and only once, from pending_review to approved or rejected.
-- Columns added later are covered automatically (the comparison is over the
-- whole row).
CREATE FUNCTION curve_guard() RETURNS trigger
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

-- token_guard lets an UPDATE of a token only revoke it, once.
CREATE FUNCTION token_guard() RETURNS trigger
LANGUAGE plpgsql AS $$
BEGIN
    IF (to_jsonb(NEW) - ARRAY['revoked_at', 'revoked_by'])
       IS DISTINCT FROM (to_jsonb(OLD) - ARRAY['revoked_at', 'revoked_by'])
       OR OLD.revoked_at IS NOT NULL THEN
        RAISE EXCEPTION 'curvekeeper: token % can only be revoked, once', OLD.id
            USING ERRCODE = 'CK001';
    END IF;
    RETURN NEW;
END;
$$;

-- ---------------------------------------------------------------------------
-- Tokens
-- ---------------------------------------------------------------------------

CREATE TABLE tokens (
    id         uuid        PRIMARY KEY,
    name       text        NOT NULL CHECK (length(name) BETWEEN 1 AND 200),
    scopes     text[]      NOT NULL CHECK (
                   cardinality(scopes) >= 1
                   AND scopes <@ ARRAY['runs:write', 'results:read', 'curves:review', 'admin']::text[]),
    -- SHA-256 of the secret; the secret itself is never stored.
    hash       bytea       NOT NULL UNIQUE CHECK (octet_length(hash) = 32),
    created_at timestamptz NOT NULL DEFAULT now(),
    created_by text        NOT NULL,
    revoked_at timestamptz,
    revoked_by text
);

CREATE TRIGGER tokens_guard BEFORE UPDATE ON tokens
    FOR EACH ROW EXECUTE FUNCTION token_guard();
CREATE TRIGGER tokens_no_delete BEFORE DELETE ON tokens
    FOR EACH ROW EXECUTE FUNCTION reject_change();
CREATE TRIGGER tokens_no_truncate BEFORE TRUNCATE ON tokens
    FOR EACH STATEMENT EXECUTE FUNCTION reject_change();

-- ---------------------------------------------------------------------------
-- Methods: each change is a new revision; the latest is max(revision).
-- ---------------------------------------------------------------------------

CREATE TABLE methods (
    name       text             NOT NULL CHECK (length(name) BETWEEN 1 AND 200),
    revision   integer          NOT NULL CHECK (revision >= 1),
    model      text             NOT NULL CHECK (model IN ('linear', 'linear_origin', 'quadratic')),
    weighting  text             NOT NULL CHECK (weighting IN ('none', '1/x', '1/x^2', '1/y', '1/y^2', '1/s^2', 'auto')),
    confidence double precision NOT NULL CHECK (confidence > 0 AND confidence < 1),
    -- [{"name": ..., "unit": ...}, ...]
    analytes   jsonb            NOT NULL CHECK (jsonb_typeof(analytes) = 'array' AND jsonb_array_length(analytes) >= 1),
    -- calib.Policy as encoding/json marshals it, every threshold filled.
    acceptance jsonb            NOT NULL CHECK (jsonb_typeof(acceptance) = 'object'),
    created_at timestamptz      NOT NULL DEFAULT now(),
    created_by text             NOT NULL,
    description text            NOT NULL DEFAULT '' CHECK (length(description) <= 4000),
    PRIMARY KEY (name, revision)
);

CREATE TRIGGER methods_immutable BEFORE UPDATE OR DELETE ON methods
    FOR EACH ROW EXECUTE FUNCTION reject_change();
CREATE TRIGGER methods_no_truncate BEFORE TRUNCATE ON methods
    FOR EACH STATEMENT EXECUTE FUNCTION reject_change();

-- ---------------------------------------------------------------------------
-- Runs, their standards' readings and their samples: immutable as received.
-- ---------------------------------------------------------------------------

CREATE TABLE runs (
    id              uuid        PRIMARY KEY,
    method          text        NOT NULL,
    method_revision integer     NOT NULL,
    instrument      text        NOT NULL CHECK (length(instrument) BETWEEN 1 AND 200),
    acquired_at     timestamptz NOT NULL,
    operator        text,
    received_at     timestamptz NOT NULL DEFAULT now(),
    received_by     text        NOT NULL,
    source_format   text        NOT NULL CHECK (source_format IN ('json', 'csv')),
    request_hash    bytea       NOT NULL,
    -- the run as received, normalised to one JSON shape whatever its format
    payload         jsonb       NOT NULL,
    FOREIGN KEY (method, method_revision) REFERENCES methods (name, revision)
);

-- One row per reading (every replicate of every standard). standard is the
-- standard's position in the run as received, replicate the reading's
-- position within it (1-based), so the run can be given back as it came.
CREATE TABLE readings (
    run_id        uuid             NOT NULL REFERENCES runs (id),
    analyte       text             NOT NULL,
    level         text             NOT NULL,
    replicate     integer          NOT NULL CHECK (replicate >= 1),
    standard      integer          NOT NULL CHECK (standard >= 0),
    concentration double precision NOT NULL CHECK (concentration >= 0 AND concentration < 'Infinity'),
    response      double precision NOT NULL CHECK (response > '-Infinity' AND response < 'Infinity'),
    PRIMARY KEY (run_id, analyte, level, replicate)
);

-- Unknown samples posted with a run. id is the handle later results refer to.
CREATE TABLE run_samples (
    id        bigint             GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
    run_id    uuid               NOT NULL REFERENCES runs (id),
    position  integer            NOT NULL CHECK (position >= 0),
    sample_id text               NOT NULL CHECK (length(sample_id) BETWEEN 1 AND 200),
    analyte   text               NOT NULL,
    responses double precision[] NOT NULL CHECK (cardinality(responses) >= 1),
    dilution  double precision   NOT NULL DEFAULT 1 CHECK (dilution > 0 AND dilution < 'Infinity'),
    UNIQUE (run_id, position)
);

CREATE INDEX run_samples_sample_id ON run_samples (sample_id);

CREATE TRIGGER runs_immutable BEFORE UPDATE OR DELETE ON runs
    FOR EACH ROW EXECUTE FUNCTION reject_change();
CREATE TRIGGER runs_no_truncate BEFORE TRUNCATE ON runs
    FOR EACH STATEMENT EXECUTE FUNCTION reject_change();
CREATE TRIGGER readings_immutable BEFORE UPDATE OR DELETE ON readings
    FOR EACH ROW EXECUTE FUNCTION reject_change();
CREATE TRIGGER readings_no_truncate BEFORE TRUNCATE ON readings
    FOR EACH STATEMENT EXECUTE FUNCTION reject_change();
CREATE TRIGGER run_samples_immutable BEFORE UPDATE OR DELETE ON run_samples
    FOR EACH ROW EXECUTE FUNCTION reject_change();
CREATE TRIGGER run_samples_no_truncate BEFORE TRUNCATE ON run_samples
    FOR EACH STATEMENT EXECUTE FUNCTION reject_change();

-- ---------------------------------------------------------------------------
-- Curves: one per analyte of a run (and one per exclusion revision later).
-- ---------------------------------------------------------------------------

CREATE TABLE curves (
    id              uuid        PRIMARY KEY,
    run_id          uuid        NOT NULL REFERENCES runs (id),
    -- the curve this one was refitted from (exclusions); NULL for a run's own fit
    revision_of     uuid        REFERENCES curves (id),
    method          text        NOT NULL,
    method_revision integer     NOT NULL,
    instrument      text        NOT NULL,
    analyte         text        NOT NULL,
    unit            text        NOT NULL,
    model           text        NOT NULL CHECK (model IN ('linear', 'linear_origin', 'quadratic')),
    -- the scheme used (the chosen one when auto was requested)
    weighting       text        NOT NULL CHECK (weighting IN ('none', '1/x', '1/x^2', '1/y', '1/y^2', '1/s^2', 'auto')),
    verdict         text        NOT NULL CHECK (verdict IN ('pass', 'fail')),
    status          text        NOT NULL DEFAULT 'pending_review'
                                CHECK (status IN ('pending_review', 'approved', 'rejected')),
    engine_version  text        NOT NULL,
    -- calib.Report as encoding/json marshals it (exported fields, Go names)
    report          jsonb       NOT NULL,
    acquired_at     timestamptz NOT NULL,
    created_at      timestamptz NOT NULL DEFAULT now(),
    created_by      text        NOT NULL,
    reviewed_at     timestamptz,
    reviewed_by     text,
    -- copies of report values for trends and history; NULL when not computed
    -- (a failed fit), intercept NULL for linear_origin, slope = b1 always
    slope           double precision,
    intercept       double precision,
    residual_sd     double precision,
    r_squared       double precision,
    lod             double precision,
    -- names of the checks that did not pass, for history without the report
    failed_checks   text[]      NOT NULL DEFAULT '{}',
    FOREIGN KEY (method, method_revision) REFERENCES methods (name, revision),
    CHECK ((status = 'pending_review') = (reviewed_at IS NULL)),
    CHECK ((reviewed_at IS NULL) = (reviewed_by IS NULL))
);

-- History: GET /v1/curves?instrument=&analyte= newest first, keyset on
-- (acquired_at, id); also serves trends per instrument and analyte.
CREATE INDEX curves_history ON curves (instrument, analyte, acquired_at DESC, id DESC);
-- History without an instrument and analyte filter.
CREATE INDEX curves_recent ON curves (acquired_at DESC, id DESC);
-- The review queue: small, because curves leave it when reviewed. Status and
-- verdict filters on the other paths are applied to the index scans above;
-- both have few values, so an index led by them would not be selective.
CREATE INDEX curves_pending ON curves (acquired_at DESC, id DESC) WHERE status = 'pending_review';
CREATE INDEX curves_run ON curves (run_id);
CREATE INDEX curves_revision_of ON curves (revision_of) WHERE revision_of IS NOT NULL;

CREATE TRIGGER curves_guard BEFORE UPDATE ON curves
    FOR EACH ROW EXECUTE FUNCTION curve_guard();
CREATE TRIGGER curves_no_delete BEFORE DELETE ON curves
    FOR EACH ROW EXECUTE FUNCTION reject_change();
CREATE TRIGGER curves_no_truncate BEFORE TRUNCATE ON curves
    FOR EACH STATEMENT EXECUTE FUNCTION reject_change();

-- ---------------------------------------------------------------------------
-- Reviews: one per curve; a second is a unique violation.
-- ---------------------------------------------------------------------------

CREATE TABLE reviews (
    curve_id uuid        PRIMARY KEY REFERENCES curves (id),
    decision text        NOT NULL CHECK (decision IN ('approve', 'reject')),
    reason   text        NOT NULL DEFAULT '',
    actor    text        NOT NULL,
    at       timestamptz NOT NULL DEFAULT now()
);

CREATE TRIGGER reviews_immutable BEFORE UPDATE OR DELETE ON reviews
    FOR EACH ROW EXECUTE FUNCTION reject_change();
CREATE TRIGGER reviews_no_truncate BEFORE TRUNCATE ON reviews
    FOR EACH STATEMENT EXECUTE FUNCTION reject_change();

-- ---------------------------------------------------------------------------
-- Audit: append-only record of every write, in the writing transaction.
-- ---------------------------------------------------------------------------

CREATE TABLE audit (
    id          bigint      GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
    at          timestamptz NOT NULL DEFAULT now(),
    actor       text        NOT NULL,
    action      text        NOT NULL,
    entity_type text        NOT NULL,
    entity_id   text        NOT NULL,
    detail      jsonb       NOT NULL DEFAULT '{}'::jsonb
);

CREATE INDEX audit_entity ON audit (entity_type, entity_id, id);

CREATE TRIGGER audit_append_only BEFORE UPDATE OR DELETE ON audit
    FOR EACH ROW EXECUTE FUNCTION reject_change();
CREATE TRIGGER audit_no_truncate BEFORE TRUNCATE ON audit
    FOR EACH STATEMENT EXECUTE FUNCTION reject_change();

-- ---------------------------------------------------------------------------
-- Idempotency keys, scoped per token: the key is the client's, and two clients
-- choosing the same key must neither collide nor see each other's responses.
-- The row is inserted in the transaction that stores the run, first, so a
-- concurrent request with the same key blocks on the primary key until that
-- transaction ends, then replays the stored response (same request hash) or
-- is refused (different hash). The foreign key to runs is deferred because
-- the key row is written before the run.
-- ---------------------------------------------------------------------------

CREATE TABLE idempotency_keys (
    token_id        uuid        NOT NULL REFERENCES tokens (id),
    key             text        NOT NULL CHECK (length(key) BETWEEN 1 AND 255),
    request_hash    bytea       NOT NULL,
    run_id          uuid        NOT NULL REFERENCES runs (id) DEFERRABLE INITIALLY DEFERRED,
    response_status integer     NOT NULL,
    response_body   jsonb       NOT NULL,
    created_at      timestamptz NOT NULL DEFAULT now(),
    PRIMARY KEY (token_id, key)
);

-- For pruning old keys (not evidence: rows may be deleted after the retry
-- window).
CREATE INDEX idempotency_keys_created ON idempotency_keys (created_at);
