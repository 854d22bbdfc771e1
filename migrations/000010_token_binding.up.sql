-- Instrument binding and the dual-role choice of tokens (lab/access.go).
--
-- instruments: the instruments a machine token may post for and reach; NULL
-- for an unbound token (admin and review tokens, and tokens issued before
-- this migration, which keep working unbound). allow_dual_role records the
-- administrator's explicit choice to let one token both post runs and
-- review curves.
--
-- Adding columns fires no row trigger, and token_guard compares whole rows
-- apart from the revocation, so both stay as issued.
ALTER TABLE tokens ADD COLUMN instruments text[]
    CHECK (instruments IS NULL OR cardinality(instruments) BETWEEN 1 AND 32);
ALTER TABLE tokens ADD COLUMN allow_dual_role boolean NOT NULL DEFAULT false;
