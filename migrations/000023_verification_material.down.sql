DROP INDEX IF EXISTS verifications_at;
ALTER TABLE verifications DROP COLUMN material;
