package db

import (
	"context"
	"strconv"

	"github.com/jackc/pgx/v5"

	"halfmark"
)

const machineCols = `id, name, sad_cm, model, serial, mlc_leaf_pairs, mlc_layout, clinical, created_at, ` + collimatorCols

func scanMachine(r pgx.Row) (halfmark.Machine, error) {
	var m halfmark.Machine
	var c collimatorRow
	err := r.Scan(&m.ID, &m.Name, &m.SADcm, &m.Model, &m.Serial, &m.MLCLeafPairs, &m.MLCLayout, &m.Clinical, &m.CreatedAt,
		&c.upperJaws, &c.upperSCD, &c.lowerSCD, &c.mlcSCD)
	m.Collimators = c.collimators()
	return m, err
}

// CreateMachine implements halfmark.MachineService.
func (d *DB) CreateMachine(ctx context.Context, a halfmark.Actor, m *halfmark.Machine) error {
	if err := m.Validate(); err != nil {
		return err
	}
	err := d.tx(ctx, func(tx pgx.Tx) error {
		c := collimatorArgs(m.Collimators)
		row := tx.QueryRow(ctx, `INSERT INTO machines (name, sad_cm, model, serial, mlc_leaf_pairs, mlc_layout, clinical, created_by,
			upper_jaws, upper_scd_cm, lower_scd_cm, mlc_scd_cm)
			VALUES ($1,$2,$3,$4,$5,$6,$7,$8,$9,$10,$11,$12) ON CONFLICT (name) DO NOTHING RETURNING id, created_at`,
			m.Name, m.SADcm, m.Model, m.Serial, m.MLCLeafPairs, m.MLCLayout, m.Clinical, a.Name, c[0], c[1], c[2], c[3])
		if err := row.Scan(&m.ID, &m.CreatedAt); err != nil {
			if err == pgx.ErrNoRows {
				return halfmark.Errorf(halfmark.EConflict, "a machine named %q already exists; choose another name", m.Name)
			}
			return err
		}
		return audit(ctx, tx, a, "create", "machine", strconv.FormatInt(m.ID, 10), m)
	})
	return err
}

// Machine implements halfmark.MachineService.
func (d *DB) Machine(ctx context.Context, id int64) (halfmark.Machine, error) {
	m, err := scanMachine(d.Pool.QueryRow(ctx, `SELECT `+machineCols+` FROM machines WHERE id = $1`, id))
	if err == pgx.ErrNoRows {
		return m, halfmark.Errorf(halfmark.ENotFound, "machine %d does not exist", id)
	}
	return m, mapErr(err)
}

// MachineByName implements halfmark.MachineService.
func (d *DB) MachineByName(ctx context.Context, name string) (halfmark.Machine, error) {
	m, err := scanMachine(d.Pool.QueryRow(ctx, `SELECT `+machineCols+` FROM machines WHERE name = $1`, name))
	if err == pgx.ErrNoRows {
		return m, halfmark.Errorf(halfmark.ENotFound, "machine %q does not exist", name)
	}
	return m, mapErr(err)
}

// Machines implements halfmark.MachineService.
func (d *DB) Machines(ctx context.Context) ([]halfmark.Machine, error) {
	rows, err := d.Pool.Query(ctx, `SELECT `+machineCols+` FROM machines ORDER BY name`)
	if err != nil {
		return nil, mapErr(err)
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (halfmark.Machine, error) { return scanMachine(r) })
	return out, mapErr(err)
}

// CreateBeam implements halfmark.MachineService.
func (d *DB) CreateBeam(ctx context.Context, a halfmark.Actor, b *halfmark.Beam) error {
	if err := b.Validate(); err != nil {
		return err
	}
	if _, err := d.Machine(ctx, b.MachineID); err != nil {
		return err
	}
	return d.tx(ctx, func(tx pgx.Tx) error {
		err := tx.QueryRow(ctx, `INSERT INTO beams (machine_id, energy_mv, fff, created_by) VALUES ($1,$2,$3,$4)
			ON CONFLICT DO NOTHING RETURNING id`, b.MachineID, b.EnergyMV, b.FFF, a.Name).Scan(&b.ID)
		if err == pgx.ErrNoRows {
			return halfmark.Errorf(halfmark.EConflict, "machine %d already has a %s beam", b.MachineID, b.Label)
		}
		if err != nil {
			return err
		}
		return audit(ctx, tx, a, "create", "beam", strconv.FormatInt(b.ID, 10), b)
	})
}

// Beams implements halfmark.MachineService.
func (d *DB) Beams(ctx context.Context, machineID int64) ([]halfmark.Beam, error) {
	rows, err := d.Pool.Query(ctx, `SELECT id, machine_id, energy_mv, fff FROM beams WHERE machine_id = $1 ORDER BY energy_mv, fff`, machineID)
	if err != nil {
		return nil, mapErr(err)
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (halfmark.Beam, error) {
		var b halfmark.Beam
		err := r.Scan(&b.ID, &b.MachineID, &b.EnergyMV, &b.FFF)
		b.Label = halfmark.BeamLabel(b.EnergyMV, b.FFF)
		return b, err
	})
	return out, mapErr(err)
}
