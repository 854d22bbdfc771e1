ALTER TABLE curves ALTER COLUMN report TYPE jsonb USING report::jsonb;
DO $$
BEGIN
    IF EXISTS (SELECT 1 FROM pg_settings
               WHERE name = 'default_toast_compression' AND 'lz4' = ANY (enumvals)) THEN
        ALTER TABLE curves ALTER COLUMN report SET COMPRESSION lz4;
    END IF;
END
$$;
