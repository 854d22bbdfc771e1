-- Drops what 000002_results_qc.up.sql added, in reverse order.
DROP TABLE IF EXISTS exclusions;
DROP TABLE IF EXISTS verifications;
DROP TABLE IF EXISTS result_events;
DROP TABLE IF EXISTS sample_results;
DROP FUNCTION IF EXISTS sample_result_guard();
DROP INDEX IF EXISTS run_samples_unique_id;
ALTER TABLE run_samples DROP COLUMN IF EXISTS acquired_at;
ALTER TABLE methods DROP COLUMN IF EXISTS qc;
