-- +goose Up
-- The drift engine: alerts and their lifecycle, service events, the record
-- of every evaluation, the scheduler's claim on each job slot, and the
-- per-series bookkeeping of incremental evaluation.

CREATE TABLE alerts (
    id                 bigserial PRIMARY KEY,
    machine_id         bigint NOT NULL REFERENCES machines(id),
    beam_id            bigint NOT NULL REFERENCES beams(id),
    series_id          bigint REFERENCES series(id),       -- NULL for a beam-level alert (overdue)
    edge               text NOT NULL DEFAULT '',
    quantity           text NOT NULL DEFAULT '',
    geometry           text NOT NULL DEFAULT '',
    family             text NOT NULL CHECK (family IN ('limit','shewhart','ewma','cusum','nelson','trend','overdue')),
    rule               text NOT NULL,
    level              integer NOT NULL CHECK (level BETWEEN 0 AND 3),
    state              text NOT NULL DEFAULT 'open' CHECK (state IN ('open','acknowledged','resolved')),
    message            text NOT NULL,
    deviation_mm       double precision,
    tolerance_mm       double precision,
    action_mm          double precision,
    projected_crossing timestamptz,
    signal_at          timestamptz,                         -- measured_at of the newest signalling point
    opened_at          timestamptz NOT NULL DEFAULT now(),
    updated_at         timestamptz NOT NULL DEFAULT now(),
    ack_by             text,
    ack_at             timestamptz,
    ack_comment        text,
    resolved_by        text,
    resolved_at        timestamptz,
    resolve_comment    text,
    CHECK (state <> 'acknowledged' OR ack_at IS NOT NULL),
    CHECK (state <> 'resolved' OR resolved_at IS NOT NULL)
);
-- At most one unresolved alert per (series, or beam for beam-level alerts,
-- and rule family); a repeat signal updates it.
CREATE UNIQUE INDEX alerts_one_unresolved ON alerts (beam_id, (coalesce(series_id, 0)), family) WHERE state <> 'resolved';
CREATE INDEX alerts_machine ON alerts (machine_id, state);
CREATE INDEX alerts_series ON alerts (series_id) WHERE series_id IS NOT NULL;

CREATE TABLE service_events (
    id           bigserial PRIMARY KEY,
    machine_id   bigint NOT NULL REFERENCES machines(id),
    at           timestamptz NOT NULL,
    note         text NOT NULL,
    edges        text[] NOT NULL DEFAULT '{}',             -- empty: every edge of the machine
    new_baseline boolean NOT NULL DEFAULT false,
    created_by   text NOT NULL,
    created_at   timestamptz NOT NULL DEFAULT now()
);
CREATE INDEX service_events_machine ON service_events (machine_id, at);

CREATE TABLE evaluations (
    id             bigserial PRIMARY KEY,
    series_id      bigint NOT NULL REFERENCES series(id),
    at             timestamptz NOT NULL,
    tolerance_hash text NOT NULL,
    level          integer NOT NULL CHECK (level BETWEEN 0 AND 3),
    rule           text NOT NULL DEFAULT '',
    details        jsonb
);
CREATE INDEX evaluations_series ON evaluations (series_id, at);

-- One row per scheduled tick that some worker claimed: two workers never
-- run the same (job, slot).
CREATE TABLE job_runs (
    id          bigserial PRIMARY KEY,
    job         text NOT NULL,
    slot        timestamptz NOT NULL,
    started_at  timestamptz NOT NULL DEFAULT clock_timestamp(),
    finished_at timestamptz,
    worker      text NOT NULL,
    result      text NOT NULL DEFAULT '',
    UNIQUE (job, slot)
);

-- The latest verdict of each series and what incremental evaluation needs.
CREATE TABLE series_state (
    series_id          bigint PRIMARY KEY REFERENCES series(id),
    evaluated_at       timestamptz NOT NULL,
    last_created_at    timestamptz,     -- newest checks.created_at seen by the evaluation
    last_measured_at   timestamptz,     -- newest point evaluated
    level              integer NOT NULL DEFAULT 0 CHECK (level BETWEEN 0 AND 3),
    rule               text NOT NULL DEFAULT '',
    deviation_mm       double precision,
    tolerance_mm       double precision,
    action_mm          double precision,
    projected_crossing timestamptz,
    tolerance_hash     text NOT NULL DEFAULT '',
    cusum_restart_at   timestamptz       -- restart the CUSUM after this point (acknowledged signal)
);
-- Incremental evaluation asks, per series, for checks stored since its last
-- evaluation.
CREATE INDEX checks_series_created ON checks (beam_id, geometry, created_at);
-- Overdue checks: the newest check of each kind per beam.
CREATE INDEX checks_beam_kind_time ON checks (beam_id, kind, measured_at);

-- +goose Down
DROP INDEX checks_series_created, checks_beam_kind_time;
DROP TABLE series_state, job_runs, evaluations, service_events, alerts;
