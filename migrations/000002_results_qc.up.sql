-- curvekeeper results and QC loop: quantified sample results with their
-- release state, the ordered change feed of those results, verification
-- standards (ICV/CCV), exclusion revisions and the method settings they need.
--
-- The same conventions as 000001_core: evidence is immutable (SQLSTATE CK001
-- from a trigger on UPDATE, DELETE, TRUNCATE); finite numbers are checked as
-- x > '-Infinity' AND x < 'Infinity', which also refuses NaN.

-- ---------------------------------------------------------------------------
-- Method QC settings. A new column, so existing revisions read '{}' and take
-- the defaults (store.QCPolicy): verification tolerance ±20 % after US EPA
-- SW-846 Method 8000D, pending curves not in force, no maximum age. Adding a
-- column fires no row trigger, so methods stay immutable.
-- ---------------------------------------------------------------------------

ALTER TABLE methods ADD COLUMN qc jsonb NOT NULL DEFAULT '{}'::jsonb
    CHECK (jsonb_typeof(qc) = 'object');

-- Samples posted after their run carry their own acquisition time; NULL
-- means the sample came with the run and was acquired with it.
ALTER TABLE run_samples ADD COLUMN acquired_at timestamptz;

-- A run's samples are unique per analyte and sample id, whether they came
-- with the run or later, so a LIMS sample id names one measurement per run.
CREATE UNIQUE INDEX run_samples_unique_id ON run_samples (run_id, analyte, sample_id);

-- ---------------------------------------------------------------------------
-- Sample results: one per sample and curve it was quantified against (a
-- sample gets a second result when an exclusion revision of its curve is
-- made). The numbers are immutable; only the release state moves, and every
-- move is a row of result_events written in the same transaction.
-- ---------------------------------------------------------------------------

CREATE FUNCTION sample_result_guard() RETURNS trigger
LANGUAGE plpgsql AS $$
BEGIN
    IF (to_jsonb(NEW) - ARRAY['release_state', 'release_reason', 'state_changed_at'])
       IS DISTINCT FROM (to_jsonb(OLD) - ARRAY['release_state', 'release_reason', 'state_changed_at']) THEN
        RAISE EXCEPTION 'curvekeeper: sample result % is immutable: only its release state may change', OLD.id
            USING ERRCODE = 'CK001';
    END IF;
    RETURN NEW;
END;
$$;

CREATE TABLE sample_results (
    id               bigint           GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
    run_sample_id    bigint           NOT NULL REFERENCES run_samples (id),
    curve_id         uuid             NOT NULL REFERENCES curves (id),
    run_id           uuid             NOT NULL REFERENCES runs (id),
    sample_id        text             NOT NULL,
    analyte          text             NOT NULL,
    -- the analyte's UCUM unit code, as the curve states it
    unit             text             NOT NULL,
    acquired_at      timestamptz      NOT NULL,
    responses        double precision[] NOT NULL CHECK (cardinality(responses) >= 1),
    dilution         double precision NOT NULL CHECK (dilution > 0 AND dilution < 'Infinity'),
    mean_response    double precision NOT NULL CHECK (mean_response > '-Infinity' AND mean_response < 'Infinity'),
    -- after the dilution factor; NULL when the curve gave no value
    concentration    double precision CHECK (concentration > '-Infinity' AND concentration < 'Infinity'),
    standard_error   double precision CHECK (standard_error > '-Infinity' AND standard_error < 'Infinity'),
    interval_low     double precision CHECK (interval_low > '-Infinity' AND interval_low < 'Infinity'),
    interval_high    double precision CHECK (interval_high > '-Infinity' AND interval_high < 'Infinity'),
    interval_level   double precision NOT NULL CHECK (interval_level > 0 AND interval_level < 1),
    interval_bounded boolean          NOT NULL,
    interval_method  text             NOT NULL,
    flags            text[]           NOT NULL DEFAULT '{}',
    release_state    text             NOT NULL CHECK (release_state IN ('provisional', 'releasable', 'withheld')),
    release_reason   text             NOT NULL,
    state_changed_at timestamptz      NOT NULL DEFAULT now(),
    created_at       timestamptz      NOT NULL DEFAULT now(),
    created_by       text             NOT NULL,
    UNIQUE (run_sample_id, curve_id),
    CHECK (interval_bounded = (interval_low IS NOT NULL AND interval_high IS NOT NULL))
);

CREATE INDEX sample_results_sample ON sample_results (sample_id, id);
CREATE INDEX sample_results_run ON sample_results (run_id, id);
CREATE INDEX sample_results_curve ON sample_results (curve_id, id);

CREATE TRIGGER sample_results_guard BEFORE UPDATE ON sample_results
    FOR EACH ROW EXECUTE FUNCTION sample_result_guard();
CREATE TRIGGER sample_results_no_delete BEFORE DELETE ON sample_results
    FOR EACH ROW EXECUTE FUNCTION reject_change();
CREATE TRIGGER sample_results_no_truncate BEFORE TRUNCATE ON sample_results
    FOR EACH STATEMENT EXECUTE FUNCTION reject_change();

-- ---------------------------------------------------------------------------
-- The change feed. seq is drawn only while the writing transaction holds the
-- transaction-level advisory lock store.ResultFeedLockKey, which it keeps
-- until it commits, so sequence numbers are handed out in commit order and a
-- reader paging by seq never passes a number that a later commit could still
-- fill (see store/result_feed.go).
-- ---------------------------------------------------------------------------

CREATE TABLE result_events (
    seq            bigint      GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
    result_id      bigint      NOT NULL REFERENCES sample_results (id),
    kind           text        NOT NULL CHECK (kind IN ('created', 'state_changed')),
    -- what caused it: run.create, samples.add, curve.review,
    -- curve.verification, curve.exclusion
    cause          text        NOT NULL,
    release_state  text        NOT NULL CHECK (release_state IN ('provisional', 'releasable', 'withheld')),
    previous_state text        CHECK (previous_state IN ('provisional', 'releasable', 'withheld')),
    reason         text        NOT NULL,
    at             timestamptz NOT NULL DEFAULT now(),
    CHECK ((kind = 'created') = (previous_state IS NULL))
);

CREATE INDEX result_events_result ON result_events (result_id, seq);

CREATE TRIGGER result_events_immutable BEFORE UPDATE OR DELETE ON result_events
    FOR EACH ROW EXECUTE FUNCTION reject_change();
CREATE TRIGGER result_events_no_truncate BEFORE TRUNCATE ON result_events
    FOR EACH STATEMENT EXECUTE FUNCTION reject_change();

-- ---------------------------------------------------------------------------
-- Verification standards (ICV/CCV) measured against a curve.
-- ---------------------------------------------------------------------------

CREATE TABLE verifications (
    id             uuid             PRIMARY KEY,
    curve_id       uuid             NOT NULL REFERENCES curves (id),
    kind           text             NOT NULL CHECK (kind IN ('initial', 'continuing')),
    level          text             NOT NULL CHECK (length(level) BETWEEN 1 AND 200),
    concentration  double precision NOT NULL CHECK (concentration > 0 AND concentration < 'Infinity'),
    responses      double precision[] NOT NULL CHECK (cardinality(responses) >= 1),
    -- NULL when the curve has no root for the mean response
    found          double precision CHECK (found > '-Infinity' AND found < 'Infinity'),
    recovery_pct   double precision CHECK (recovery_pct > '-Infinity' AND recovery_pct < 'Infinity'),
    difference_pct double precision CHECK (difference_pct > '-Infinity' AND difference_pct < 'Infinity'),
    limit_pct      double precision NOT NULL CHECK (limit_pct > 0 AND limit_pct < 'Infinity'),
    passed         boolean          NOT NULL,
    detail         text             NOT NULL,
    at             timestamptz      NOT NULL,
    created_at     timestamptz      NOT NULL DEFAULT now(),
    created_by     text             NOT NULL
);

CREATE INDEX verifications_curve ON verifications (curve_id, at, id);

CREATE TRIGGER verifications_immutable BEFORE UPDATE OR DELETE ON verifications
    FOR EACH ROW EXECUTE FUNCTION reject_change();
CREATE TRIGGER verifications_no_truncate BEFORE TRUNCATE ON verifications
    FOR EACH STATEMENT EXECUTE FUNCTION reject_change();

-- ---------------------------------------------------------------------------
-- Exclusions: why a revision left readings out. One per revision; the
-- revision is a curve row with revision_of set, the original is untouched.
-- A curve has at most one direct revision, so history is a chain.
-- ---------------------------------------------------------------------------

CREATE TABLE exclusions (
    curve_id     uuid        PRIMARY KEY REFERENCES curves (id),
    revision_of  uuid        NOT NULL UNIQUE REFERENCES curves (id),
    -- [{"level": ..., "replicate": ...}], every reading the revision excludes
    points       jsonb       NOT NULL CHECK (jsonb_typeof(points) = 'array'),
    reason       text        NOT NULL CHECK (length(reason) >= 1),
    range_reason text,
    actor        text        NOT NULL,
    at           timestamptz NOT NULL DEFAULT now()
);

CREATE TRIGGER exclusions_immutable BEFORE UPDATE OR DELETE ON exclusions
    FOR EACH ROW EXECUTE FUNCTION reject_change();
CREATE TRIGGER exclusions_no_truncate BEFORE TRUNCATE ON exclusions
    FOR EACH STATEMENT EXECUTE FUNCTION reject_change();

-- The curve in force is found by curves_history (instrument, analyte,
-- acquired_at DESC, id DESC) of 000001_core; no index of its own.
