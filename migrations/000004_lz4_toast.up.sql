-- Compress the large JSON columns with lz4 instead of pglz where the server
-- was built with lz4 (PostgreSQL 14+; Debian's packages are). A curve's
-- report (every point, check and limit) and a run's payload are several
-- kilobytes, so each insert compresses them for TOAST; lz4 compresses
-- several times faster than pglz at a similar ratio on this JSON, which the
-- ingest benchmark (cmd/curvekeeper-bench) shows. Only rows written from now
-- on are affected; existing rows stay readable as they are. A server without
-- lz4 keeps pglz.
DO $$
BEGIN
    IF EXISTS (SELECT 1 FROM pg_settings
               WHERE name = 'default_toast_compression' AND 'lz4' = ANY (enumvals)) THEN
        ALTER TABLE curves ALTER COLUMN report SET COMPRESSION lz4;
        ALTER TABLE runs ALTER COLUMN payload SET COMPRESSION lz4;
        ALTER TABLE idempotency_keys ALTER COLUMN response_body SET COMPRESSION lz4;
        ALTER TABLE audit ALTER COLUMN detail SET COMPRESSION lz4;
    END IF;
END
$$;
