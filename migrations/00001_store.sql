-- +goose Up
-- The edge-measurement store. Checks (with their edge results), baselines
-- and the audit log are append-only: a correction is a new row that supersedes
-- the old one; triggers refuse UPDATE and DELETE on them.

CREATE TABLE machines (
    id             bigserial PRIMARY KEY,
    name           text NOT NULL UNIQUE,
    sad_cm         double precision NOT NULL CHECK (sad_cm > 0),
    model          text NOT NULL DEFAULT '',
    serial         text NOT NULL DEFAULT '',
    mlc_leaf_pairs integer NOT NULL DEFAULT 0 CHECK (mlc_leaf_pairs >= 0),
    mlc_layout     text NOT NULL DEFAULT '',
    clinical       boolean NOT NULL DEFAULT true,
    created_at     timestamptz NOT NULL DEFAULT now(),
    created_by     text NOT NULL
);

CREATE TABLE beams (
    id         bigserial PRIMARY KEY,
    machine_id bigint NOT NULL REFERENCES machines(id),
    energy_mv  double precision NOT NULL CHECK (energy_mv > 0),
    fff        boolean NOT NULL DEFAULT false,
    created_at timestamptz NOT NULL DEFAULT now(),
    created_by text NOT NULL,
    UNIQUE (machine_id, energy_mv, fff)
);

CREATE TABLE checks (
    id               uuid PRIMARY KEY,
    machine_id       bigint NOT NULL REFERENCES machines(id),
    beam_id          bigint NOT NULL REFERENCES beams(id),
    kind             text NOT NULL CHECK (kind IN ('morning','monthly','annual','commissioning','post-service')),
    measured_at      timestamptz NOT NULL,
    device           text NOT NULL DEFAULT '',
    operator         text NOT NULL DEFAULT '',
    note             text NOT NULL DEFAULT '',
    ssd_cm           double precision,
    depth_cm         double precision,
    field_x_cm       double precision,
    field_y_cm       double precision,
    collimator_deg   double precision,
    gantry_deg       double precision,
    geometry         text NOT NULL,
    supersedes       uuid UNIQUE REFERENCES checks(id),
    -- The edge results, kept with their check so that a check and its
    -- edges are one immutable record: [{"edge": "X1", "position_mm": 55.1,
    -- "iso_position_mm": 50.09, "penumbra_mm": 3.2, "light_position_mm": …,
    -- "iso_light_position_mm": …}, …]
    edges            jsonb NOT NULL CHECK (jsonb_typeof(edges) = 'array'),
    body_hash        text NOT NULL,
    analysis_version text NOT NULL DEFAULT '',
    created_at       timestamptz NOT NULL DEFAULT now(),
    created_by       text NOT NULL
);
CREATE INDEX checks_machine_time ON checks (machine_id, measured_at);
CREATE INDEX checks_series ON checks (beam_id, geometry, measured_at);

CREATE TABLE series (
    id         bigserial PRIMARY KEY,
    machine_id bigint NOT NULL REFERENCES machines(id),
    beam_id    bigint NOT NULL REFERENCES beams(id),
    geometry   text NOT NULL,
    edge       text NOT NULL,
    quantity   text NOT NULL CHECK (quantity IN ('position','penumbra','light_offset')),
    created_at timestamptz NOT NULL DEFAULT now(),
    UNIQUE (machine_id, beam_id, geometry, edge, quantity)
);

-- The current points of every series: one value per edge result of a check
-- that no later check supersedes.
CREATE VIEW series_points AS
SELECT s.id AS series_id, c.id AS check_id, c.measured_at, c.created_at, c.kind, c.device, c.operator,
       CASE s.quantity
           WHEN 'position' THEN er.iso_position_mm
           WHEN 'penumbra' THEN er.penumbra_mm
           ELSE er.iso_light_position_mm - er.iso_position_mm
       END AS value
FROM series s
JOIN checks c ON c.machine_id = s.machine_id AND c.beam_id = s.beam_id AND c.geometry = s.geometry
CROSS JOIN LATERAL jsonb_to_recordset(c.edges)
    AS er(edge text, iso_position_mm float8, penumbra_mm float8, iso_light_position_mm float8)
WHERE er.edge = s.edge
  AND NOT EXISTS (SELECT 1 FROM checks x WHERE x.supersedes = c.id)
  AND CASE s.quantity
          WHEN 'position' THEN true
          WHEN 'penumbra' THEN er.penumbra_mm IS NOT NULL
          ELSE er.iso_light_position_mm IS NOT NULL
      END;

CREATE TABLE baselines (
    id         bigserial PRIMARY KEY,
    series_id  bigint NOT NULL REFERENCES series(id),
    version    integer NOT NULL,
    value_mm   double precision,
    sigma_mm   double precision CHECK (sigma_mm > 0),
    valid_from timestamptz NOT NULL,
    source     text NOT NULL CHECK (source IN ('set','estimated','service')),
    set_by     text NOT NULL,
    reason     text NOT NULL,
    created_at timestamptz NOT NULL DEFAULT now(),
    UNIQUE (series_id, version)
);

CREATE TABLE tokens (
    id         bigserial PRIMARY KEY,
    name       text NOT NULL,
    role       text NOT NULL CHECK (role IN ('therapist','physicist','admin')),
    secret_sha256 bytea NOT NULL UNIQUE,
    created_at timestamptz NOT NULL DEFAULT now(),
    created_by text NOT NULL,
    revoked_at timestamptz
);

CREATE TABLE audit_log (
    id        bigserial PRIMARY KEY,
    at        timestamptz NOT NULL DEFAULT clock_timestamp(),
    actor     text NOT NULL,
    action    text NOT NULL,
    entity    text NOT NULL,
    entity_id text NOT NULL,
    detail    jsonb
);
CREATE INDEX audit_entity ON audit_log (entity, entity_id);

-- +goose StatementBegin
CREATE FUNCTION halfmark_refuse_change() RETURNS trigger LANGUAGE plpgsql AS $$
BEGIN
    RAISE EXCEPTION 'halfmark: % on % is refused: records are append-only; store a correction instead', TG_OP, TG_TABLE_NAME
        USING ERRCODE = 'insufficient_privilege';
END
$$;
-- +goose StatementEnd

CREATE TRIGGER audit_log_append_only BEFORE UPDATE OR DELETE ON audit_log FOR EACH ROW EXECUTE FUNCTION halfmark_refuse_change();
CREATE TRIGGER checks_append_only BEFORE UPDATE OR DELETE ON checks FOR EACH ROW EXECUTE FUNCTION halfmark_refuse_change();
CREATE TRIGGER baselines_append_only BEFORE UPDATE OR DELETE ON baselines FOR EACH ROW EXECUTE FUNCTION halfmark_refuse_change();
CREATE TRIGGER audit_log_no_truncate BEFORE TRUNCATE ON audit_log FOR EACH STATEMENT EXECUTE FUNCTION halfmark_refuse_change();
CREATE TRIGGER checks_no_truncate BEFORE TRUNCATE ON checks FOR EACH STATEMENT EXECUTE FUNCTION halfmark_refuse_change();

-- +goose Down
DROP VIEW series_points;
DROP TABLE audit_log, tokens, baselines, series, checks, beams, machines;
DROP FUNCTION halfmark_refuse_change();
