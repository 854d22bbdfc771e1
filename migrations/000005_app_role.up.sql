-- curvekeeper_app: the role the service works as (store.OpenApp runs SET
-- ROLE curvekeeper_app on each of its connections when the role exists and
-- the login user may assume it). Migrations keep running as the login user,
-- the owner of the tables.
--
-- The role may read and write the service's tables but not change or remove
-- the audit trail: UPDATE, DELETE and TRUNCATE on audit are not granted, on
-- top of the append-only triggers of 000001_core. It cannot create objects,
-- nor write schema_migrations.
--
-- Roles belong to the whole PostgreSQL cluster, not to one database: the
-- role is created once and reused by every database of the cluster (several
-- curvekeeper databases, test databases). When the migrating user may not
-- create roles (neither superuser nor CREATEROLE), the role is skipped with a
-- notice and the service keeps the login user's privileges, guarded by the
-- triggers only.
--
-- Tables added by later migrations get the grants below through the default
-- privileges; a later append-only table must REVOKE UPDATE, DELETE, TRUNCATE
-- from curvekeeper_app in its own migration.
DO $$
BEGIN
    IF NOT EXISTS (SELECT 1 FROM pg_roles WHERE rolname = 'curvekeeper_app') THEN
        BEGIN
            CREATE ROLE curvekeeper_app NOLOGIN NOSUPERUSER NOCREATEDB NOCREATEROLE NOINHERIT;
        EXCEPTION
            WHEN duplicate_object OR unique_violation THEN
                NULL; -- created meanwhile by a migration of another database
            WHEN insufficient_privilege THEN
                RAISE NOTICE 'curvekeeper: % may not create roles; the service will work with its own privileges', current_user;
                RETURN;
        END;
    END IF;

    -- Let the login user assume the role (a superuser may without this).
    IF NOT pg_has_role(session_user, 'curvekeeper_app', 'MEMBER') THEN
        BEGIN
            EXECUTE format('GRANT curvekeeper_app TO %I', session_user);
        EXCEPTION WHEN insufficient_privilege THEN
            RAISE NOTICE 'curvekeeper: % may not grant curvekeeper_app to itself; the service will work with its own privileges', session_user;
        END;
    END IF;

    EXECUTE format('GRANT CONNECT, TEMPORARY ON DATABASE %I TO curvekeeper_app', current_database());
    GRANT USAGE ON SCHEMA public TO curvekeeper_app;
    GRANT SELECT, INSERT, UPDATE, DELETE ON ALL TABLES IN SCHEMA public TO curvekeeper_app;
    GRANT USAGE, SELECT ON ALL SEQUENCES IN SCHEMA public TO curvekeeper_app;
    REVOKE UPDATE, DELETE, TRUNCATE ON audit FROM curvekeeper_app;
    REVOKE INSERT, UPDATE, DELETE, TRUNCATE ON schema_migrations FROM curvekeeper_app;
    ALTER DEFAULT PRIVILEGES IN SCHEMA public GRANT SELECT, INSERT, UPDATE, DELETE ON TABLES TO curvekeeper_app;
    ALTER DEFAULT PRIVILEGES IN SCHEMA public GRANT USAGE, SELECT ON SEQUENCES TO curvekeeper_app;
END;
$$;
