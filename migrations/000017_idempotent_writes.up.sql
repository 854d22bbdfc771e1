-- Idempotency-Key on every write that creates a record, not only runs.
--
-- One table keeps every key (primary key token, key: a key names one request
-- of its token whatever the route). operation says which write claimed it;
-- a run's row keeps run_id and its 201 body as jsonb as before, every other
-- write keeps its answer as sent: status, Location and the body's bytes.
-- A write claims its key with response_status 0 and replaces it with the
-- answer in the same transaction, so a committed row always holds one.
ALTER TABLE idempotency_keys
    ADD COLUMN operation text NOT NULL DEFAULT 'createRun'
        CHECK (operation ~ '^[A-Za-z][A-Za-z0-9]{0,63}$'),
    ADD COLUMN response_location text,
    ADD COLUMN response_raw bytea,
    ALTER COLUMN run_id DROP NOT NULL,
    ALTER COLUMN response_body DROP NOT NULL;

ALTER TABLE idempotency_keys ADD CONSTRAINT idempotency_keys_answer CHECK (
    (operation = 'createRun' AND run_id IS NOT NULL AND response_body IS NOT NULL AND response_raw IS NULL)
    OR (operation <> 'createRun' AND run_id IS NULL AND response_body IS NULL
        AND (response_status = 0 OR response_status BETWEEN 200 AND 299)));
