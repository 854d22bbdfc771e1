DROP INDEX IF EXISTS audit_actor;
DROP TABLE signatures;
DROP FUNCTION signature_guard();
ALTER TABLE tokens DROP COLUMN owner;
DROP TABLE people;
