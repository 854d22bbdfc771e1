-- A curve's report is written once by the engine and read back whole; no
-- statement looks inside it. Stored as jsonb, each insert made the server
-- parse the ~14 kB document and convert it to jsonb's binary form: measured
-- on PostgreSQL 15 with lz4 compression, 2,000 reports inserted in 412 and
-- 463 ms as jsonb, 223 and 231 ms as json (which only checks the syntax),
-- so about 100 µs of server CPU per ingested curve. json also keeps the
-- document byte for byte as the engine wrote it, which suits an audit
-- record; SQL can still read into it with the json operators.
-- The type change rewrites the table under an exclusive lock: on a large
-- existing database, plan it for a quiet moment.
ALTER TABLE curves ALTER COLUMN report TYPE json USING report::json;
-- The type change resets the column's compression; keep lz4 (000004).
DO $$
BEGIN
    IF EXISTS (SELECT 1 FROM pg_settings
               WHERE name = 'default_toast_compression' AND 'lz4' = ANY (enumvals)) THEN
        ALTER TABLE curves ALTER COLUMN report SET COMPRESSION lz4;
    END IF;
END
$$;
