package db

import (
	"context"
	"encoding/json"

	"github.com/jackc/pgx/v5"

	"halfmark"
)

// exportSQL reads checks with their machine name, beam, and each edge
// with the position and penumbra baselines in force at the check's time,
// oldest stored first (an original before its correction), one row per
// edge in stored order.
var exportSQL = `SELECT ` + checkCols + `, m.name, b.energy_mv, b.fff, ` + edgeOutcomeCols + `
	FROM checks c JOIN machines m ON m.id = c.machine_id JOIN beams b ON b.id = c.beam_id
	` + edgeOutcomeJoins + `
	WHERE ($1 = 0 OR c.machine_id = $1) AND ($2::timestamptz IS NULL OR c.measured_at >= $2)
		AND ($3::timestamptz IS NULL OR c.measured_at < $3)
	ORDER BY c.created_at, c.supersedes IS NOT NULL, c.measured_at, c.id, er.n`

// ExportChecks returns every check of the filter (machine, from, to; kind,
// beam and limit are ignored) with its edges, stored deviations and
// provenance, for the spreadsheet export.
func (d *DB) ExportChecks(ctx context.Context, f halfmark.CheckFilter) ([]halfmark.ExportCheck, error) {
	rows, err := d.Pool.Query(ctx, exportSQL, f.MachineID, nullTime(f.From), nullTime(f.To))
	if err != nil {
		return nil, mapErr(err)
	}
	defer rows.Close()
	var out []halfmark.ExportCheck
	for rows.Next() {
		var c halfmark.Check
		var kind, machine string
		var energy float64
		var fff bool
		var o halfmark.EdgeOutcome
		var bn *float64
		s := &c.Setup
		var method string
		if err := rows.Scan(&c.ID, &c.MachineID, &c.BeamID, &kind, &c.MeasuredAt, &c.Device, &method, &c.Operator, &c.Note,
			&s.SSDcm, &s.DepthCm, &s.FieldXcm, &s.FieldYcm, &s.CollimatorDeg, &s.GantryDeg,
			&c.Supersedes, &c.SupersededBy, &c.AnalysisVersion, &c.CreatedAt, &c.CreatedBy, &machine, &energy, &fff,
			&o.Edge, &o.PositionMM, &o.IsoPositionMM, &o.PenumbraMM, &o.LightPositionMM, &o.IsoLightPositionMM,
			&o.SeriesID, &o.BaselineMM, &bn); err != nil {
			return nil, mapErr(err)
		}
		c.Kind, c.Method = halfmark.CheckKind(kind), halfmark.Method(method)
		fillDeviations(&o, bn)
		if n := len(out); n == 0 || out[n-1].Check.ID != c.ID {
			out = append(out, halfmark.ExportCheck{Machine: machine, Beam: halfmark.BeamLabel(energy, fff), Check: halfmark.StoredCheck{Check: c}})
		}
		x := &out[len(out)-1].Check
		x.Edges = append(x.Edges, o)
		x.Check.Edges = append(x.Check.Edges, o.EdgeResult)
	}
	return out, mapErr(rows.Err())
}

// fillDeviations sets an edge's deviations from the baselines in force.
func fillDeviations(o *halfmark.EdgeOutcome, penumbraBaseline *float64) {
	if o.BaselineMM != nil {
		v := o.IsoPositionMM - *o.BaselineMM
		o.DeviationMM = &v
	}
	if penumbraBaseline != nil && o.PenumbraMM != nil {
		v := *o.PenumbraMM - *penumbraBaseline
		o.PenumbraDeviationMM = &v
	}
}

// checkEdges reads the stored edge results of the given checks in one
// query, for listings.
func (d *DB) checkEdges(ctx context.Context, ids []string) (map[string][]halfmark.EdgeResult, error) {
	out := make(map[string][]halfmark.EdgeResult, len(ids))
	if len(ids) == 0 {
		return out, nil
	}
	rows, err := d.Pool.Query(ctx, `SELECT id::text, edges FROM checks WHERE id = ANY($1::text[]::uuid[])`, ids)
	if err != nil {
		return nil, mapErr(err)
	}
	var id string
	var raw []byte
	_, err = pgx.ForEachRow(rows, []any{&id, &raw}, func() error {
		var es []halfmark.EdgeResult
		if err := json.Unmarshal(raw, &es); err != nil {
			return err
		}
		out[id] = es
		return nil
	})
	return out, mapErr(err)
}
