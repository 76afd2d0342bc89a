-- +goose Up
-- Signed monthly reports: the exact PDF bytes a physicist signed, with
-- their SHA-256, the signer and the reason given when the month had
-- missing required checks or active Level 2/3 findings. Append-only like
-- the other records: one signature per machine and month, never changed.
CREATE TABLE signed_reports (
    id             bigserial PRIMARY KEY,
    machine_id     bigint NOT NULL REFERENCES machines (id),
    month          text NOT NULL CHECK (month ~ '^[0-9]{4}-(0[1-9]|1[0-2])$'),
    pdf            bytea NOT NULL CHECK (length(pdf) > 0),
    sha256         bytea NOT NULL CHECK (length(sha256) = 32),
    signed_by      text NOT NULL,
    signed_by_user bigint,
    signed_at      timestamptz NOT NULL DEFAULT now(),
    reason         text NOT NULL DEFAULT '',
    blockers       jsonb NOT NULL DEFAULT '[]',
    UNIQUE (machine_id, month),
    CHECK (sha256 = sha256(pdf)),
    CHECK (jsonb_array_length(blockers) = 0 OR reason <> '')
);

CREATE TRIGGER signed_reports_append_only BEFORE UPDATE OR DELETE ON signed_reports FOR EACH ROW EXECUTE FUNCTION halfmark_refuse_change();
CREATE TRIGGER signed_reports_no_truncate BEFORE TRUNCATE ON signed_reports FOR EACH STATEMENT EXECUTE FUNCTION halfmark_refuse_change();

-- +goose Down
DROP TABLE signed_reports;
