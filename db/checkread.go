package db

import (
	"context"
	"fmt"

	"github.com/jackc/pgx/v5"

	"halfmark"
)

const checkCols = `c.id::text, c.machine_id, c.beam_id, c.kind, c.measured_at, c.device, c.method, c.operator, c.note,
	c.ssd_cm, c.depth_cm, c.field_x_cm, c.field_y_cm, c.collimator_deg, c.gantry_deg,
	coalesce(c.supersedes::text, ''), coalesce((SELECT s.id::text FROM checks s WHERE s.supersedes = c.id), ''),
	c.analysis_version, c.created_at, c.created_by`

func scanCheck(r pgx.Row) (halfmark.Check, error) {
	var c halfmark.Check
	var kind, method string
	s := &c.Setup
	err := r.Scan(&c.ID, &c.MachineID, &c.BeamID, &kind, &c.MeasuredAt, &c.Device, &method, &c.Operator, &c.Note,
		&s.SSDcm, &s.DepthCm, &s.FieldXcm, &s.FieldYcm, &s.CollimatorDeg, &s.GantryDeg,
		&c.Supersedes, &c.SupersededBy, &c.AnalysisVersion, &c.CreatedAt, &c.CreatedBy)
	c.Kind, c.Method = halfmark.CheckKind(kind), halfmark.Method(method)
	return c, err
}

// baselineAt is the baseline row in force for series s at the check's time:
// the newest version whose valid_from is not after measured_at.
const baselineAt = `LEFT JOIN LATERAL (SELECT value_mm FROM baselines b WHERE b.series_id = %[1]s.id AND b.valid_from <= c.measured_at
	ORDER BY b.valid_from DESC, b.version DESC LIMIT 1) %[2]s ON true`

// edgeOutcomeJoins unfolds each check c's edges (er, in stored order n)
// with their position and penumbra series (sp, sn: same machine, beam,
// geometry and method) and the baselines in force at the check's time (bp,
// bn). The check read and the export share it.
var edgeOutcomeJoins = `CROSS JOIN LATERAL ROWS FROM (jsonb_to_recordset(c.edges)
		AS (edge text, position_mm float8, iso_position_mm float8, penumbra_mm float8, light_position_mm float8,
			iso_light_position_mm float8)) WITH ORDINALITY
		AS er(edge, position_mm, iso_position_mm, penumbra_mm, light_position_mm, iso_light_position_mm, n)
	LEFT JOIN series sp ON sp.machine_id = c.machine_id AND sp.beam_id = c.beam_id AND sp.geometry = c.geometry AND sp.method = c.method
		AND sp.edge = er.edge AND sp.quantity = 'position'
	LEFT JOIN series sn ON sn.machine_id = c.machine_id AND sn.beam_id = c.beam_id AND sn.geometry = c.geometry AND sn.method = c.method
		AND sn.edge = er.edge AND sn.quantity = 'penumbra'
	` + fmt.Sprintf(baselineAt, "sp", "bp") + `
	` + fmt.Sprintf(baselineAt, "sn", "bn")

// edgeOutcomeCols are the columns edgeOutcomeJoins provides, as scanned.
const edgeOutcomeCols = `er.edge, er.position_mm, er.iso_position_mm, er.penumbra_mm, er.light_position_mm,
	er.iso_light_position_mm, coalesce(sp.id, 0), bp.value_mm, bn.value_mm`

// edgeOutcomesSQL reads a check's edges with their position series and
// the position and penumbra baselines in force at the check's time.
var edgeOutcomesSQL = `SELECT ` + edgeOutcomeCols + ` FROM checks c ` + edgeOutcomeJoins + ` WHERE c.id = $1 ORDER BY er.n`

// Check implements halfmark.CheckService.
func (d *DB) Check(ctx context.Context, id string) (halfmark.StoredCheck, error) {
	if !halfmark.IsUUID(id) {
		return halfmark.StoredCheck{}, halfmark.Errorf(halfmark.ENotFound, "check %q does not exist (ids are UUIDs)", id)
	}
	c, err := scanCheck(d.Pool.QueryRow(ctx, `SELECT `+checkCols+` FROM checks c WHERE c.id = $1`, id))
	if err == pgx.ErrNoRows {
		return halfmark.StoredCheck{}, halfmark.Errorf(halfmark.ENotFound, "check %s does not exist", id)
	}
	if err != nil {
		return halfmark.StoredCheck{}, mapErr(err)
	}
	rows, err := d.Pool.Query(ctx, edgeOutcomesSQL, id)
	if err != nil {
		return halfmark.StoredCheck{}, mapErr(err)
	}
	out := halfmark.StoredCheck{Check: c}
	defer rows.Close()
	for rows.Next() {
		var o halfmark.EdgeOutcome
		var bn *float64
		if err := rows.Scan(&o.Edge, &o.PositionMM, &o.IsoPositionMM, &o.PenumbraMM, &o.LightPositionMM,
			&o.IsoLightPositionMM, &o.SeriesID, &o.BaselineMM, &bn); err != nil {
			return halfmark.StoredCheck{}, mapErr(err)
		}
		if o.BaselineMM != nil {
			v := o.IsoPositionMM - *o.BaselineMM
			o.DeviationMM = &v
		}
		if bn != nil && o.PenumbraMM != nil {
			v := *o.PenumbraMM - *bn
			o.PenumbraDeviationMM = &v
		}
		out.Edges = append(out.Edges, o)
		out.Check.Edges = append(out.Check.Edges, o.EdgeResult)
	}
	return out, mapErr(rows.Err())
}

// Checks implements halfmark.CheckService; each check carries its stored
// edge results.
func (d *DB) Checks(ctx context.Context, f halfmark.CheckFilter) ([]halfmark.Check, error) {
	if f.Limit <= 0 || f.Limit > 5000 {
		f.Limit = 500
	}
	rows, err := d.Pool.Query(ctx, `SELECT `+checkCols+` FROM checks c
		WHERE ($1 = 0 OR c.machine_id = $1) AND ($2 = 0 OR c.beam_id = $2) AND ($3 = '' OR c.kind = $3)
		AND ($4::timestamptz IS NULL OR c.measured_at >= $4) AND ($5::timestamptz IS NULL OR c.measured_at < $5)
		ORDER BY c.measured_at DESC, c.created_at DESC LIMIT $6`,
		f.MachineID, f.BeamID, string(f.Kind), nullTime(f.From), nullTime(f.To), f.Limit)
	if err != nil {
		return nil, mapErr(err)
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (halfmark.Check, error) { return scanCheck(r) })
	if err != nil {
		return nil, mapErr(err)
	}
	ids := make([]string, len(out))
	for i := range out {
		ids[i] = out[i].ID
	}
	edges, err := d.checkEdges(ctx, ids)
	for i := range out {
		out[i].Edges = edges[out[i].ID]
	}
	return out, err
}

// CorrectedPoints returns the points of a series whose checks have been
// corrected (a later check supersedes them), marked Corrected with the
// correcting check's id and note as the reason, in measurement order. They
// are not in Points and never in a statistic; they are shown so that a
// correction never makes a record vanish from view.
func (d *DB) CorrectedPoints(ctx context.Context, seriesID int64) ([]halfmark.Point, error) {
	rows, err := d.Pool.Query(ctx, `SELECT c.id::text, c.measured_at,
			CASE s.quantity WHEN 'position' THEN er.iso_position_mm WHEN 'penumbra' THEN er.penumbra_mm
				ELSE er.iso_light_position_mm - er.iso_position_mm END,
			c.kind, c.device, c.operator, x.id::text, x.note
		FROM series s
		JOIN checks c ON c.machine_id = s.machine_id AND c.beam_id = s.beam_id AND c.geometry = s.geometry
		JOIN checks x ON x.supersedes = c.id
		CROSS JOIN LATERAL jsonb_to_recordset(c.edges)
			AS er(edge text, iso_position_mm float8, penumbra_mm float8, iso_light_position_mm float8)
		WHERE s.id = $1 AND er.edge = s.edge
		  AND CASE s.quantity WHEN 'position' THEN true WHEN 'penumbra' THEN er.penumbra_mm IS NOT NULL
		      ELSE er.iso_light_position_mm IS NOT NULL END
		ORDER BY c.measured_at, c.created_at`, seriesID)
	if err != nil {
		return nil, mapErr(err)
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (halfmark.Point, error) {
		p := halfmark.Point{Corrected: true}
		var kind string
		err := r.Scan(&p.CheckID, &p.MeasuredAt, &p.Value, &kind, &p.Device, &p.Operator, &p.SupersededBy, &p.CorrectionReason)
		p.Kind = halfmark.CheckKind(kind)
		if p.CorrectionReason == "" {
			p.CorrectionReason = "corrected by check " + p.SupersededBy
		}
		return p, err
	})
	return out, mapErr(err)
}
