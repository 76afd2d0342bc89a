-- +goose Up
-- Dashboard users, their server-side sessions, and the raw measurement data
-- behind checks. Users carry an argon2id password hash in PHC string form
-- ($argon2id$v=19$m=…,t=…,p=…$salt$hash) and a lock-out counter; sessions
-- store only the SHA-256 of the random token held in the browser cookie.
-- Raw data is append-only like checks.

CREATE TABLE users (
    id              bigserial PRIMARY KEY,
    email           text NOT NULL UNIQUE CHECK (email = lower(email)),
    role            text NOT NULL CHECK (role IN ('therapist','physicist','admin')),
    password_hash   text NOT NULL,
    failed_sign_ins integer NOT NULL DEFAULT 0 CHECK (failed_sign_ins >= 0),
    locked_until    timestamptz,
    created_at      timestamptz NOT NULL DEFAULT now(),
    created_by      text NOT NULL
);

CREATE TABLE sessions (
    token_sha256 bytea PRIMARY KEY,
    user_id      bigint NOT NULL REFERENCES users(id) ON DELETE CASCADE,
    created_at   timestamptz NOT NULL,
    last_seen_at timestamptz NOT NULL
);
CREATE INDEX sessions_user ON sessions (user_id);

CREATE TABLE raw_data (
    id               bigserial PRIMARY KEY,
    check_id         uuid NOT NULL REFERENCES checks(id),
    kind             text NOT NULL CHECK (kind IN ('profile','image','picket')),
    filename         text NOT NULL,
    content          bytea NOT NULL,
    options          jsonb,
    analysis         jsonb,
    analysis_version text NOT NULL DEFAULT '',
    created_at       timestamptz NOT NULL DEFAULT now(),
    created_by       text NOT NULL
);
CREATE INDEX raw_data_check ON raw_data (check_id);

CREATE TRIGGER raw_data_append_only BEFORE UPDATE OR DELETE ON raw_data FOR EACH ROW EXECUTE FUNCTION halfmark_refuse_change();
CREATE TRIGGER raw_data_no_truncate BEFORE TRUNCATE ON raw_data FOR EACH STATEMENT EXECUTE FUNCTION halfmark_refuse_change();

-- +goose Down
DROP TABLE raw_data, sessions, users;
