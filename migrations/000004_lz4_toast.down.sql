-- Back to the server's default compression for new rows (pglz unless
-- configured otherwise); rows written with lz4 stay readable.
ALTER TABLE curves ALTER COLUMN report SET COMPRESSION default;
ALTER TABLE runs ALTER COLUMN payload SET COMPRESSION default;
ALTER TABLE idempotency_keys ALTER COLUMN response_body SET COMPRESSION default;
ALTER TABLE audit ALTER COLUMN detail SET COMPRESSION default;
