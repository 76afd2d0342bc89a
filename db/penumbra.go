package db

import (
	"context"
	"strconv"
	"time"

	"github.com/jackc/pgx/v5"

	"halfmark"
)

// collimatorCols are the machine columns of halfmark.Collimators.
const collimatorCols = `upper_jaws, upper_scd_cm, lower_scd_cm, mlc_scd_cm`

type collimatorRow struct {
	upperJaws                  *string
	upperSCD, lowerSCD, mlcSCD *float64
}

func (c collimatorRow) collimators() *halfmark.Collimators {
	if c.upperJaws == nil || c.upperSCD == nil || c.lowerSCD == nil || c.mlcSCD == nil {
		return nil
	}
	return &halfmark.Collimators{UpperJaws: *c.upperJaws, UpperSCDcm: *c.upperSCD, LowerSCDcm: *c.lowerSCD, MLCSCDcm: *c.mlcSCD}
}

// collimatorArgs are the four column values (all NULL for nil).
func collimatorArgs(c *halfmark.Collimators) [4]any {
	if c == nil {
		return [4]any{nil, nil, nil, nil}
	}
	return [4]any{c.UpperJaws, c.UpperSCDcm, c.LowerSCDcm, c.MLCSCDcm}
}

// SetCollimators implements halfmark.MachineService.
func (d *DB) SetCollimators(ctx context.Context, a halfmark.Actor, machineID int64, c halfmark.Collimators) (halfmark.Machine, error) {
	var m halfmark.Machine
	err := d.tx(ctx, func(tx pgx.Tx) error {
		var err error
		m, err = scanMachine(tx.QueryRow(ctx, `SELECT `+machineCols+` FROM machines WHERE id = $1 FOR UPDATE`, machineID))
		if err == pgx.ErrNoRows {
			return halfmark.Errorf(halfmark.ENotFound, "machine %d does not exist", machineID)
		}
		if err != nil {
			return err
		}
		if err := m.ValidateCollimators(&c); err != nil {
			return err
		}
		before := m.Collimators
		v := collimatorArgs(&c)
		if _, err := tx.Exec(ctx, `UPDATE machines SET upper_jaws = $2, upper_scd_cm = $3, lower_scd_cm = $4, mlc_scd_cm = $5 WHERE id = $1`,
			machineID, v[0], v[1], v[2], v[3]); err != nil {
			return err
		}
		m.Collimators = &c
		return audit(ctx, tx, a, "set-collimators", "machine", strconv.FormatInt(machineID, 10),
			map[string]any{"before": before, "after": c})
	})
	return m, err
}

// beamMachine returns a beam and its machine; ENotFound for an unknown beam.
func (d *DB) beamMachine(ctx context.Context, beamID int64) (halfmark.Beam, halfmark.Machine, error) {
	var b halfmark.Beam
	err := d.Pool.QueryRow(ctx, `SELECT id, machine_id, energy_mv, fff FROM beams WHERE id = $1`, beamID).Scan(&b.ID, &b.MachineID, &b.EnergyMV, &b.FFF)
	if err == pgx.ErrNoRows {
		return b, halfmark.Machine{}, halfmark.Errorf(halfmark.ENotFound, "beam %d does not exist", beamID)
	}
	if err != nil {
		return b, halfmark.Machine{}, mapErr(err)
	}
	b.Label = halfmark.BeamLabel(b.EnergyMV, b.FFF)
	m, err := d.Machine(ctx, b.MachineID)
	return b, m, err
}

// penumbraPointsSQL reads the current penumbra values of a beam that carry
// an SSD and a depth, measured with one method ($4): values of different
// methods carry different systematic offsets and are never fitted together.
const penumbraPointsSQL = `
SELECT c.measured_at, c.ssd_cm, c.depth_cm, c.geometry, er.edge, er.penumbra_mm, c.method
FROM checks c
CROSS JOIN LATERAL jsonb_to_recordset(c.edges) AS er(edge text, penumbra_mm float8)
WHERE c.beam_id = $1
  AND er.penumbra_mm IS NOT NULL AND c.ssd_cm IS NOT NULL AND c.depth_cm IS NOT NULL
  AND NOT EXISTS (SELECT 1 FROM checks x WHERE x.supersedes = c.id)
  AND c.measured_at >= $2 AND c.measured_at < $3
  AND c.method = $4
ORDER BY c.measured_at, c.id, er.edge`

// PenumbraMethods implements halfmark.PenumbraService.
func (d *DB) PenumbraMethods(ctx context.Context, beamID int64) (map[halfmark.Method]int, error) {
	if _, _, err := d.beamMachine(ctx, beamID); err != nil {
		return nil, err
	}
	rows, err := d.Pool.Query(ctx, `SELECT c.method, count(*) FROM checks c
		CROSS JOIN LATERAL jsonb_to_recordset(c.edges) AS er(edge text, penumbra_mm float8)
		WHERE c.beam_id = $1 AND er.penumbra_mm IS NOT NULL AND c.ssd_cm IS NOT NULL AND c.depth_cm IS NOT NULL
		  AND NOT EXISTS (SELECT 1 FROM checks x WHERE x.supersedes = c.id)
		GROUP BY c.method`, beamID)
	if err != nil {
		return nil, mapErr(err)
	}
	defer rows.Close()
	out := map[halfmark.Method]int{}
	for rows.Next() {
		var m string
		var n int
		if err := rows.Scan(&m, &n); err != nil {
			return nil, mapErr(err)
		}
		out[halfmark.Method(m)] = n
	}
	return out, mapErr(rows.Err())
}

// farFuture stands for "no end" in time ranges.
var farFuture = time.Date(9999, 1, 1, 0, 0, 0, 0, time.UTC)

// PenumbraPoints implements halfmark.PenumbraService.
func (d *DB) PenumbraPoints(ctx context.Context, beamID int64, method halfmark.Method, from, until time.Time) (halfmark.PenumbraSet, error) {
	b, m, err := d.beamMachine(ctx, beamID)
	if err != nil {
		return halfmark.PenumbraSet{}, err
	}
	set := halfmark.PenumbraSet{Machine: m, Beam: b}
	end := until
	if end.IsZero() {
		end = farFuture
	}
	// The baseline period in force at the end: the newest valid_from of
	// the beam's penumbra baselines before it.
	var start *time.Time
	if err := d.Pool.QueryRow(ctx, `SELECT max(bl.valid_from) FROM baselines bl JOIN series s ON s.id = bl.series_id
		WHERE s.beam_id = $1 AND s.quantity = 'penumbra' AND bl.valid_from < $2`, beamID, end).Scan(&start); err != nil {
		return set, mapErr(err)
	}
	if start != nil {
		set.PeriodStart = *start
	}
	if from.IsZero() {
		from = set.PeriodStart
	}
	rows, err := d.Pool.Query(ctx, penumbraPointsSQL, beamID, from, end, string(method))
	if err != nil {
		return set, mapErr(err)
	}
	set.Points, err = pgx.CollectRows(rows, func(r pgx.CollectableRow) (halfmark.PenumbraPoint, error) {
		var p halfmark.PenumbraPoint
		var meth string
		err := r.Scan(&p.At, &p.SSDcm, &p.DepthCm, &p.Geometry, &p.Edge, &p.PenumbraMM, &meth)
		p.Method = halfmark.Method(meth)
		return p, err
	})
	return set, mapErr(err)
}
