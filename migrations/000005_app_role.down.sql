-- Takes back what 000005_app_role.up.sql granted in this database. The role
-- itself is dropped only when no other database of the cluster still grants
-- it anything (roles are cluster-wide).
DO $$
BEGIN
    IF NOT EXISTS (SELECT 1 FROM pg_roles WHERE rolname = 'curvekeeper_app') THEN
        RETURN;
    END IF;
    ALTER DEFAULT PRIVILEGES IN SCHEMA public REVOKE SELECT, INSERT, UPDATE, DELETE ON TABLES FROM curvekeeper_app;
    ALTER DEFAULT PRIVILEGES IN SCHEMA public REVOKE USAGE, SELECT ON SEQUENCES FROM curvekeeper_app;
    REVOKE ALL ON ALL TABLES IN SCHEMA public FROM curvekeeper_app;
    REVOKE ALL ON ALL SEQUENCES IN SCHEMA public FROM curvekeeper_app;
    REVOKE ALL ON SCHEMA public FROM curvekeeper_app;
    EXECUTE format('REVOKE ALL ON DATABASE %I FROM curvekeeper_app', current_database());
    BEGIN
        DROP ROLE curvekeeper_app;
    EXCEPTION WHEN dependent_objects_still_exist OR insufficient_privilege THEN
        NULL; -- still used by another database of the cluster, or not ours to drop
    END;
END;
$$;
