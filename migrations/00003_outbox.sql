-- +goose Up
-- The notification outbox. A notification is written in the same
-- transaction as the alert change that causes it, and a deliverer sends it
-- later; dedupe_key makes a repeated enqueue a no-op. There is no foreign key
-- to alerts so that notifications stay decoupled from the alert lifecycle.
CREATE TABLE outbox (
    id              bigserial PRIMARY KEY,
    created_at      timestamptz NOT NULL DEFAULT now(),
    channel         text NOT NULL CHECK (channel IN ('email','webhook')),
    level           integer NOT NULL CHECK (level BETWEEN 0 AND 3),
    alert_id        bigint,
    digest_day      date,
    -- "alert:<id>:level:<n>:email", "digest:<yyyy-mm-dd>:webhook", …
    dedupe_key      text NOT NULL UNIQUE,
    subject         text NOT NULL DEFAULT '',
    body            text NOT NULL DEFAULT '',
    payload         jsonb,
    recipients      text[] NOT NULL DEFAULT '{}',
    attempts        integer NOT NULL DEFAULT 0 CHECK (attempts >= 0),
    next_attempt_at timestamptz NOT NULL DEFAULT now(),
    delivered_at    timestamptz,
    last_error      text,
    CHECK (channel <> 'email' OR cardinality(recipients) > 0),
    CHECK (channel <> 'webhook' OR payload IS NOT NULL)
);
CREATE INDEX outbox_due ON outbox (next_attempt_at) WHERE delivered_at IS NULL;

-- +goose Down
DROP TABLE outbox;
