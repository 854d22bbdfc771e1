-- Claimed times stay representable: a time the service stores as a
-- client's claim (a run's acquired_at, a late sample's, a result's, a
-- verification's at) lies in years 1 to 9999 in UTC, the range RFC 3339 and
-- the JSON encoding of a time can write back (lab.CheckTimestamp is the same
-- rule, checked before any write; this is the database's own guard).
--
-- The receipt time beside each claim is the row's own: runs.received_at,
-- run_samples and sample_results.created_at, verifications.created_at (the
-- service bounds a claim by receipt plus a skew, lab.DefaultFutureSkew).
--
-- NOT VALID: rows stored before this rule are immutable and are not
-- rewritten; every new row is checked.

ALTER TABLE runs ADD CONSTRAINT runs_acquired_at_representable
    CHECK (acquired_at >= '0001-01-01 00:00:00+00' AND acquired_at < '10000-01-01 00:00:00+00') NOT VALID;
ALTER TABLE curves ADD CONSTRAINT curves_acquired_at_representable
    CHECK (acquired_at >= '0001-01-01 00:00:00+00' AND acquired_at < '10000-01-01 00:00:00+00') NOT VALID;
ALTER TABLE run_samples ADD CONSTRAINT run_samples_acquired_at_representable
    CHECK (acquired_at >= '0001-01-01 00:00:00+00' AND acquired_at < '10000-01-01 00:00:00+00') NOT VALID;
ALTER TABLE sample_results ADD CONSTRAINT sample_results_acquired_at_representable
    CHECK (acquired_at >= '0001-01-01 00:00:00+00' AND acquired_at < '10000-01-01 00:00:00+00') NOT VALID;
ALTER TABLE verifications ADD CONSTRAINT verifications_at_representable
    CHECK (at >= '0001-01-01 00:00:00+00' AND at < '10000-01-01 00:00:00+00') NOT VALID;
