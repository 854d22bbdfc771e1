ALTER TABLE tokens DROP COLUMN allow_dual_role;
ALTER TABLE tokens DROP COLUMN instruments;
