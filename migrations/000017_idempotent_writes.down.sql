DELETE FROM idempotency_keys WHERE operation <> 'createRun';
ALTER TABLE idempotency_keys
    DROP CONSTRAINT idempotency_keys_answer,
    ALTER COLUMN run_id SET NOT NULL,
    ALTER COLUMN response_body SET NOT NULL,
    DROP COLUMN response_raw,
    DROP COLUMN response_location,
    DROP COLUMN operation;
