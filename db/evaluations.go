package db

import (
	"context"
	"time"

	"halfmark"
)

// EvalSeries is one series with everything an evaluation needs: its
// machine and beam, the baseline in force, the CUSUM restart point and its
// current points in measurement order.
type EvalSeries struct {
	halfmark.Series
	MachineName string
	BeamLabel   string
	Clinical    bool
	// Baseline in force at the evaluation time (nil: none set; estimate
	// from the first points).
	BaselineValueMM, BaselineSigmaMM *float64
	BaselineFrom                     *time.Time
	CUSUMRestart                     *time.Time

	Times         []time.Time
	ValuesMM      []float64
	Kinds         []halfmark.CheckKind
	CheckIDs      []string
	LastCreatedAt time.Time // newest checks.created_at among the points
	// FamilySize is the number of series of the machine: the family whose
	// false alarms the statistical charts keep near one series' rate.
	FamilySize int
}

// LoadEvalSeries reads the given series with their points (two queries for
// the whole list). at chooses the baseline in force.
func (d *DB) LoadEvalSeries(ctx context.Context, ids []int64, at time.Time) ([]EvalSeries, error) {
	if len(ids) == 0 {
		return nil, nil
	}
	rows, err := d.Pool.Query(ctx, `SELECT s.id, s.machine_id, s.beam_id, s.geometry, s.edge, s.quantity, s.method, m.name, m.clinical,
			b.energy_mv, b.fff, bl.value_mm, bl.sigma_mm, bl.valid_from, st.cusum_restart_at,
			(SELECT count(*) FROM series f WHERE f.machine_id = s.machine_id)
		FROM series s JOIN machines m ON m.id = s.machine_id JOIN beams b ON b.id = s.beam_id
		LEFT JOIN LATERAL (SELECT value_mm, sigma_mm, valid_from FROM baselines x WHERE x.series_id = s.id AND x.valid_from <= $2
		                   ORDER BY x.valid_from DESC, x.version DESC LIMIT 1) bl ON true
		LEFT JOIN series_state st ON st.series_id = s.id
		WHERE s.id = ANY($1) ORDER BY s.id`, ids, at)
	if err != nil {
		return nil, mapErr(err)
	}
	out := make([]EvalSeries, 0, len(ids))
	index := make(map[int64]int, len(ids))
	for rows.Next() {
		var e EvalSeries
		var q, method string
		var energy float64
		var fff bool
		if err := rows.Scan(&e.ID, &e.MachineID, &e.BeamID, &e.Geometry, &e.Edge, &q, &method, &e.MachineName, &e.Clinical,
			&energy, &fff, &e.BaselineValueMM, &e.BaselineSigmaMM, &e.BaselineFrom, &e.CUSUMRestart, &e.FamilySize); err != nil {
			rows.Close()
			return nil, mapErr(err)
		}
		e.Quantity, e.Method, e.BeamLabel = halfmark.Quantity(q), halfmark.Method(method), halfmark.BeamLabel(energy, fff)
		index[e.ID] = len(out)
		out = append(out, e)
	}
	if err := rows.Err(); err != nil {
		return nil, mapErr(err)
	}
	prows, err := d.Pool.Query(ctx, pointsSQL, ids)
	if err != nil {
		return nil, mapErr(err)
	}
	defer prows.Close()
	var sid int64
	var mt, ct time.Time
	var v float64
	var kind, checkID string
	for prows.Next() {
		if err := prows.Scan(&sid, &mt, &ct, &checkID, &v, &kind); err != nil {
			return nil, mapErr(err)
		}
		e := &out[index[sid]]
		e.Times, e.ValuesMM, e.Kinds = append(e.Times, mt), append(e.ValuesMM, v), append(e.Kinds, halfmark.CheckKind(kind))
		e.CheckIDs = append(e.CheckIDs, checkID)
		if ct.After(e.LastCreatedAt) {
			e.LastCreatedAt = ct
		}
	}
	return out, mapErr(prows.Err())
}

// pointsSQL reads the current points of the series $1 with the semantics
// of the series_points view, but visits each check of a (machine, beam,
// geometry) once for all the series it feeds, instead of once per series:
// about four times faster for jaw series read together.
const pointsSQL = `WITH sel AS (SELECT id, machine_id, beam_id, geometry, edge, quantity, method FROM series WHERE id = ANY($1)),
	grp AS (SELECT DISTINCT machine_id, beam_id, geometry, method FROM sel)
	SELECT s.id, c.measured_at, c.created_at, c.id::text,
	       CASE s.quantity WHEN 'position' THEN er.iso_position_mm
	                       WHEN 'penumbra' THEN er.penumbra_mm
	                       ELSE er.iso_light_position_mm - er.iso_position_mm END,
	       c.kind
	FROM grp g
	JOIN checks c ON c.beam_id = g.beam_id AND c.geometry = g.geometry AND c.method = g.method AND c.machine_id + 0 = g.machine_id
	CROSS JOIN LATERAL jsonb_to_recordset(c.edges)
	    AS er(edge text, iso_position_mm float8, penumbra_mm float8, iso_light_position_mm float8)
	JOIN sel s ON s.machine_id = g.machine_id AND s.beam_id = g.beam_id AND s.geometry = g.geometry AND s.method = g.method AND s.edge = er.edge
	WHERE NOT EXISTS (SELECT 1 FROM checks x WHERE x.supersedes = c.id)
	  AND CASE s.quantity WHEN 'position' THEN true
	                      WHEN 'penumbra' THEN er.penumbra_mm IS NOT NULL
	                      ELSE er.iso_light_position_mm IS NOT NULL END
	ORDER BY s.id, c.measured_at, c.created_at`

// AutoActor is the actor of automatic changes (findings and alerts opened,
// escalated or resolved by the drift engine).
var AutoActor = halfmark.Actor{Name: "halfmark (automatic)", Role: halfmark.RoleAdmin}
