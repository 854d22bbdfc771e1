-- Drops the core schema in the reverse order of 000001_core.up.sql. DROP TABLE
-- is not a TRUNCATE or DELETE, so the append-only triggers do not stand in its
-- way; the triggers go with their tables.
DROP TABLE IF EXISTS idempotency_keys;
DROP TABLE IF EXISTS audit;
DROP TABLE IF EXISTS reviews;
DROP TABLE IF EXISTS curves;
DROP TABLE IF EXISTS run_samples;
DROP TABLE IF EXISTS readings;
DROP TABLE IF EXISTS runs;
DROP TABLE IF EXISTS methods;
DROP TABLE IF EXISTS tokens;
DROP FUNCTION IF EXISTS token_guard();
DROP FUNCTION IF EXISTS curve_guard();
DROP FUNCTION IF EXISTS reject_change();
