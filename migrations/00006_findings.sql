-- +goose Up
-- Findings: one physical fault of one component, pooled over every series
-- that sees it. Series are keyed by measurement method as well, so values
-- with different systematic offsets (a console readout, an EPID image, a
-- water-tank scan) are never mixed in one chart.

-- 1. The measurement method of every check. Existing checks get the method
--    their raw data or device implies; records stay otherwise unchanged.
ALTER TABLE checks ADD COLUMN method text NOT NULL DEFAULT 'typed'
    CHECK (method IN ('typed','epid','scan','film','other'));
ALTER TABLE checks DISABLE TRIGGER checks_append_only;
UPDATE checks c SET method = CASE
    WHEN EXISTS (SELECT 1 FROM raw_data r WHERE r.check_id = c.id AND r.kind IN ('image','picket')) THEN 'epid'
    WHEN EXISTS (SELECT 1 FROM raw_data r WHERE r.check_id = c.id AND r.kind = 'profile') THEN 'scan'
    WHEN c.device ~* '(epid|portal)' THEN 'epid'
    WHEN c.device ~* 'film' THEN 'film'
    WHEN c.device ~* '(tank|scan|array|chamber|diode)' THEN 'scan'
    ELSE 'typed' END;
ALTER TABLE checks ENABLE TRIGGER checks_append_only;
CREATE INDEX checks_series_key ON checks (beam_id, geometry, method, measured_at);

-- 2. Series keyed by method. An existing series keeps its id (and its
--    baselines) for the method most of its points were measured with; the
--    points of any other method move to a new series of their own, whose
--    baseline is estimated from its first points.
ALTER TABLE series ADD COLUMN method text NOT NULL DEFAULT 'typed'
    CHECK (method IN ('typed','epid','scan','film','other'));
WITH counts AS (
    SELECT s.id, c.method, count(*) AS n
    FROM series s
    JOIN checks c ON c.machine_id = s.machine_id AND c.beam_id = s.beam_id AND c.geometry = s.geometry
    WHERE c.edges @> jsonb_build_array(jsonb_build_object('edge', s.edge))
    GROUP BY s.id, c.method
), top AS (
    SELECT DISTINCT ON (id) id, method FROM counts ORDER BY id, n DESC, method
)
UPDATE series s SET method = top.method FROM top WHERE top.id = s.id;
ALTER TABLE series DROP CONSTRAINT series_machine_id_beam_id_geometry_edge_quantity_key;
ALTER TABLE series ADD CONSTRAINT series_key UNIQUE (machine_id, beam_id, geometry, edge, quantity, method);
INSERT INTO series (machine_id, beam_id, geometry, edge, quantity, method)
SELECT DISTINCT s.machine_id, s.beam_id, s.geometry, s.edge, s.quantity, c.method
FROM series s
JOIN checks c ON c.machine_id = s.machine_id AND c.beam_id = s.beam_id AND c.geometry = s.geometry
WHERE c.method <> s.method AND c.edges @> jsonb_build_array(jsonb_build_object('edge', s.edge))
ON CONFLICT DO NOTHING;

DROP VIEW series_points;
CREATE VIEW series_points AS
SELECT s.id AS series_id, c.id AS check_id, c.measured_at, c.created_at, c.kind, c.device, c.operator, c.method,
       CASE s.quantity
           WHEN 'position' THEN er.iso_position_mm
           WHEN 'penumbra' THEN er.penumbra_mm
           ELSE er.iso_light_position_mm - er.iso_position_mm
       END AS value
FROM series s
JOIN checks c ON c.machine_id = s.machine_id AND c.beam_id = s.beam_id AND c.geometry = s.geometry AND c.method = s.method
CROSS JOIN LATERAL jsonb_to_recordset(c.edges)
    AS er(edge text, iso_position_mm float8, penumbra_mm float8, iso_light_position_mm float8)
WHERE er.edge = s.edge
  AND NOT EXISTS (SELECT 1 FROM checks x WHERE x.supersedes = c.id)
  AND CASE s.quantity
          WHEN 'position' THEN true
          WHEN 'penumbra' THEN er.penumbra_mm IS NOT NULL
          ELSE er.iso_light_position_mm IS NOT NULL
      END;

-- 3. Findings. At most one active finding per (machine, component,
--    direction of change); the drift engine alone sets level, magnitude,
--    onset, crossing and evidence.
CREATE TABLE findings (
    id              bigserial PRIMARY KEY,
    machine_id      bigint NOT NULL REFERENCES machines(id),
    component_kind  text NOT NULL CHECK (component_kind IN ('jaw','mlc_bank','mlc_leaf','penumbra','light_field')),
    component       text NOT NULL,
    direction       integer NOT NULL CHECK (direction IN (-1, 1)),
    level           integer NOT NULL CHECK (level BETWEEN 1 AND 3),
    notified_level  integer NOT NULL DEFAULT 0 CHECK (notified_level BETWEEN 0 AND 3),
    state           text NOT NULL DEFAULT 'open' CHECK (state IN ('open','acknowledged','resolved')),
    magnitude_mm    double precision NOT NULL,
    magnitude_lo_mm double precision NOT NULL,
    magnitude_hi_mm double precision NOT NULL,
    onset           timestamptz,
    crossing        jsonb NOT NULL,
    evidence        jsonb NOT NULL CHECK (jsonb_typeof(evidence) = 'array'),
    cause           jsonb,
    message         text NOT NULL,
    opened_at       timestamptz NOT NULL,
    updated_at      timestamptz NOT NULL,
    ack_by          text,
    ack_at          timestamptz,
    ack_comment     text,
    resolved_by     text,
    resolved_at     timestamptz,
    resolve_comment text,
    CHECK (state <> 'acknowledged' OR ack_at IS NOT NULL),
    CHECK (state <> 'resolved' OR resolved_at IS NOT NULL)
);
CREATE UNIQUE INDEX findings_one_active ON findings (machine_id, component_kind, component, direction) WHERE state <> 'resolved';
CREATE INDEX findings_machine ON findings (machine_id, state);

-- Per-series alerts stay as evidence of a finding and are not notified on
-- their own.
ALTER TABLE alerts ADD COLUMN finding_id bigint REFERENCES findings(id);
CREATE INDEX alerts_finding ON alerts (finding_id) WHERE finding_id IS NOT NULL;
ALTER TABLE outbox ADD COLUMN finding_id bigint;

-- 4. The engine's stored judgement of each series, chart included: every
--    page reads it instead of judging again.
ALTER TABLE series_state ADD COLUMN evaluation jsonb;

-- +goose Down
ALTER TABLE series_state DROP COLUMN evaluation;
ALTER TABLE outbox DROP COLUMN finding_id;
ALTER TABLE alerts DROP COLUMN finding_id;
DROP TABLE findings;
DROP VIEW series_points;
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
DELETE FROM series s WHERE EXISTS (SELECT 1 FROM series o WHERE o.machine_id = s.machine_id AND o.beam_id = s.beam_id
    AND o.geometry = s.geometry AND o.edge = s.edge AND o.quantity = s.quantity AND o.id < s.id);
ALTER TABLE series DROP CONSTRAINT series_key;
ALTER TABLE series ADD CONSTRAINT series_machine_id_beam_id_geometry_edge_quantity_key UNIQUE (machine_id, beam_id, geometry, edge, quantity);
ALTER TABLE series DROP COLUMN method;
DROP INDEX checks_series_key;
ALTER TABLE checks DISABLE TRIGGER checks_append_only;
ALTER TABLE checks DROP COLUMN method;
ALTER TABLE checks ENABLE TRIGGER checks_append_only;
