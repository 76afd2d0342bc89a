-- +goose Up
-- Two roles: the owner (who runs these migrations and owns every table) and
-- the runtime role the service connects as, which owns nothing. Only an
-- owner or a superuser may DISABLE or DROP a trigger (ALTER TABLE needs
-- ownership) and only a superuser may SET session_replication_role, so the
-- append-only triggers hold against the runtime role.
--
-- halfmark_grant_runtime(role) gives the runtime role what the service
-- needs, table by table, and is run by `halfmark migrate` after every
-- migration, so tables added later are covered:
--   append-only tables (those with a "<table>_append_only" trigger): SELECT,
--     INSERT, and a TRUNCATE trigger is added where one is missing;
--   the migration bookkeeping table: SELECT (to see that nothing is pending);
--   sessions: SELECT, INSERT, UPDATE, DELETE (sign-out deletes the row);
--   every other table: SELECT, INSERT, UPDATE (state that moves on);
--   sequences: USAGE, SELECT; views: SELECT.
-- Nothing grants TRUNCATE, REFERENCES or TRIGGER, nor CREATE in the schema.

CREATE TRIGGER baselines_no_truncate BEFORE TRUNCATE ON baselines FOR EACH STATEMENT EXECUTE FUNCTION halfmark_refuse_change();

-- +goose StatementBegin
CREATE FUNCTION halfmark_grant_runtime(app name) RETURNS void LANGUAGE plpgsql AS $$
DECLARE
    t record;
    append_only boolean;
BEGIN
    EXECUTE format('REVOKE ALL ON ALL TABLES IN SCHEMA public FROM %I', app);
    EXECUTE format('REVOKE CREATE ON SCHEMA public FROM %I', app);
    EXECUTE format('GRANT USAGE ON SCHEMA public TO %I', app);
    -- PostgreSQL before 15 lets every role create objects in public.
    BEGIN
        REVOKE CREATE ON SCHEMA public FROM PUBLIC;
    EXCEPTION WHEN insufficient_privilege THEN
        RAISE NOTICE 'halfmark: could not revoke CREATE on schema public from PUBLIC (not the schema owner)';
    END;
    FOR t IN SELECT c.oid, c.relname, c.relkind FROM pg_class c JOIN pg_namespace n ON n.oid = c.relnamespace
             WHERE n.nspname = 'public' AND c.relkind IN ('r', 'p', 'v', 'S') LOOP
        IF t.relkind = 'S' THEN
            EXECUTE format('GRANT USAGE, SELECT ON SEQUENCE public.%I TO %I', t.relname, app);
            CONTINUE;
        END IF;
        IF t.relkind = 'v' OR t.relname = 'goose_db_version' THEN
            EXECUTE format('GRANT SELECT ON public.%I TO %I', t.relname, app);
            CONTINUE;
        END IF;
        SELECT EXISTS (SELECT 1 FROM pg_trigger WHERE tgrelid = t.oid AND tgname = t.relname || '_append_only')
            INTO append_only;
        IF append_only THEN
            IF NOT EXISTS (SELECT 1 FROM pg_trigger WHERE tgrelid = t.oid AND (tgtype & 32) <> 0) THEN
                EXECUTE format('CREATE TRIGGER %I BEFORE TRUNCATE ON public.%I FOR EACH STATEMENT EXECUTE FUNCTION halfmark_refuse_change()',
                    t.relname || '_no_truncate', t.relname);
            END IF;
            EXECUTE format('GRANT SELECT, INSERT ON public.%I TO %I', t.relname, app);
        ELSIF t.relname = 'sessions' THEN
            EXECUTE format('GRANT SELECT, INSERT, UPDATE, DELETE ON public.%I TO %I', t.relname, app);
        ELSE
            EXECUTE format('GRANT SELECT, INSERT, UPDATE ON public.%I TO %I', t.relname, app);
        END IF;
    END LOOP;
END
$$;
-- +goose StatementEnd

-- +goose Down
DROP FUNCTION halfmark_grant_runtime(name);
DROP TRIGGER baselines_no_truncate ON baselines;
